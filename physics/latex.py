"""LaTeX for paper tables: escaping that leaves no live TeX, typeset line labels, whole tables.

`latex_escape` makes any text safe to print: every TeX special character (``\\ { } ^ ~ & % $ # _``)
is escaped, Greek letters become math, other non-ASCII letters become TeX accents; a ``$...$``
pair is kept as math only when it holds nothing but letters, digits, operators and a short list
of harmless commands (Greek letters, ``\\pm``, ``\\mathrm`` ...), so ``\\input{...}`` or
``\\write18`` always comes out as printed text.

`latex_label` typesets a line label the way papers do: ``Hα`` -> ``H$\\alpha$``,
``[O III] 5007`` -> ``[O\\,\\textsc{iii}]~5007``, ``Fe XXVI Lyα1`` ->
``Fe\\,\\textsc{xxvi} Ly$\\alpha_{1}$``.

`render_table` writes a whole table (plain LaTeX ``table``/``tabular`` or an AASTeX
``deluxetable*``) from a list of column headings, units and cells, with a caption and notes.
A cell that starts with ``[`` is preceded by ``{}`` so that the ``\\\\`` ending the row before it
never reads it as an optional argument.
"""

import re
import unicodedata

__all__ = ["latex_escape", "latex_label", "render_table", "GREEK"]

#: Greek letters -> TeX math command names.
GREEK = dict(zip(
    "αβγδεζηθικλμνξπρστυφχψωΓΔΘΛΞΠΣΦΨΩ",
    ["alpha", "beta", "gamma", "delta", "epsilon", "zeta", "eta", "theta", "iota", "kappa",
     "lambda", "mu", "nu", "xi", "pi", "rho", "sigma", "tau", "upsilon", "phi", "chi", "psi",
     "omega", "Gamma", "Delta", "Theta", "Lambda", "Xi", "Pi", "Sigma", "Phi", "Psi", "Omega"]))

_TEXT_SPECIAL = {
    "\\": r"\textbackslash{}", "{": r"\{", "}": r"\}", "^": r"\textasciicircum{}",
    "~": r"\textasciitilde{}", "&": r"\&", "%": r"\%", "$": r"\$", "#": r"\#", "_": r"\_",
    "<": r"\textless{}", ">": r"\textgreater{}", "|": r"\textbar{}",
}
_SYMBOLS = {
    "Å": r"\AA{}", "°": r"$^{\circ}$", "±": r"$\pm$", "×": r"$\times$", "µ": r"$\mu$",
    "–": "--", "—": "---", "…": r"\ldots{}", "‘": "`", "’": "'", "“": "``", "”": "''",
    "−": "$-$", "·": r"$\cdot$", "ß": r"\ss{}", "ø": r"\o{}", "Ø": r"\O{}", "æ": r"\ae{}",
    "Æ": r"\AE{}", "å": r"\aa{}", "\u00a0": "~", "\t": " ", "\n": " ", "\r": " ",
}
_ACCENTS = {"\u0301": "'", "\u0300": "`", "\u0302": "^", "\u0308": '"', "\u0303": "~",
            "\u0327": "c", "\u030a": "r", "\u030c": "v", "\u0304": "="}

# commands allowed inside kept math: Greek letters and a few harmless symbols
_MATH_COMMANDS = set(GREEK.values()) | {
    "varepsilon", "vartheta", "varphi", "varrho", "varsigma", "pm", "mp", "times", "cdot",
    "odot", "oplus", "prime", "circ", "sim", "simeq", "approx", "le", "ge", "leq", "geq", "ll",
    "gg", "infty", "mathrm", "rm", "AA", "mathring", "left", "right", "langle", "rangle",
}
_MATH = re.compile(r"(?<!\\)\$([^$]*)(?<!\\)\$")
_MATH_OK = re.compile(r"^(?:[A-Za-z0-9\s^_{}()\[\]+\-=,.;:/|<>*'!]|\\[,;!: ]|\\[A-Za-z]+)*$")


def _math_is_safe(body):
    if not _MATH_OK.match(body):
        return False
    if any(cmd not in _MATH_COMMANDS for cmd in re.findall(r"\\([A-Za-z]+)", body)):
        return False
    depth = 0
    for ch in re.sub(r"\\[{}]", "", body):
        depth += {"{": 1, "}": -1}.get(ch, 0)
        if depth < 0:
            return False
    return depth == 0


def _text(text):
    out = []
    for ch in text:
        if ch in _TEXT_SPECIAL:
            out.append(_TEXT_SPECIAL[ch])
        elif ch in GREEK:
            out.append(f"$\\{GREEK[ch]}$")
        elif ch in _SYMBOLS:
            out.append(_SYMBOLS[ch])
        elif ch.isascii():
            out.append(ch if ch.isprintable() else " ")
        else:
            base, *marks = unicodedata.normalize("NFKD", ch)
            if base.isascii() and base.isprintable() and base not in _TEXT_SPECIAL:
                for mark in marks:
                    if mark in _ACCENTS:
                        base = f"\\{_ACCENTS[mark]}{{{base}}}"
                out.append(base)
            else:
                out.append("?")
    return "".join(out)


def latex_escape(text):
    """Text made safe for LaTeX: every special character escaped, harmless math kept.

    Parameters
    ----------
    text : str

    Returns
    -------
    str
        Escaped text.  ``$...$`` survives as math only if it holds letters, digits, operators,
        braces and commands from a short list (Greek letters, ``\\pm``, ``\\times``,
        ``\\mathrm`` ...); anything else in it is printed literally.

    Examples
    --------
    >>> latex_escape("50% of H_2 & co")
    '50\\\\% of H\\\\_2 \\\\& co'
    >>> print(latex_escape(r"H$\\beta$ \\input{x}"))
    H$\\beta$ \\textbackslash{}input\\{x\\}
    >>> print(latex_escape(r"$\\input{x}$"))
    \\$\\textbackslash{}input\\{x\\}\\$
    """
    text = str(text)
    out, pos = [], 0
    for m in _MATH.finditer(text):
        if not _math_is_safe(m.group(1)):
            continue
        out.append(_text(text[pos:m.start()]))
        out.append(m.group(0))
        pos = m.end()
    out.append(_text(text[pos:]))
    return "".join(out)


_ION = re.compile(r"(?<![A-Za-z])([A-Z][a-z]?) ([IVXL]+)(?![A-Za-z])")
_GREEK_RUN = re.compile(f"([{''.join(GREEK)}])([0-9]*)")


def latex_label(label):
    """A line label typeset for a paper.

    Ionisation stages become small capitals after a thin space, Greek letters math (a digit
    right after one becomes its subscript), a space before a wavelength a tie; everything else
    is escaped with `latex_escape`.

    Examples
    --------
    >>> print(latex_label("Hα"))
    H$\\alpha$
    >>> print(latex_label("[O III] 5007"))
    [O\\,\\textsc{iii}]~5007
    >>> print(latex_label("Fe XXVI Lyα1"))
    Fe\\,\\textsc{xxvi} Ly$\\alpha_{1}$
    >>> print(latex_label(r"\\input{x}"))
    \\textbackslash{}input\\{x\\}
    """
    text = str(label)
    if "$" in text:  # math given by the user: escape only
        return latex_escape(text)
    pieces, pos = [], 0
    marks = sorted([(m.start(), m.end(), "ion", m) for m in _ION.finditer(text)]
                   + [(m.start(), m.end(), "greek", m) for m in _GREEK_RUN.finditer(text)],
                   key=lambda t: t[0])
    for start, end, what, m in marks:
        if start < pos:
            continue
        pieces.append(latex_escape(text[pos:start]))
        if what == "ion":
            pieces.append(f"{m.group(1)}\\,\\textsc{{{m.group(2).lower()}}}")
        else:
            sub = f"_{{{m.group(2)}}}" if m.group(2) else ""
            pieces.append(f"$\\{GREEK[m.group(1)]}{sub}$")
        pos = end
    pieces.append(latex_escape(text[pos:]))
    out = "".join(pieces)
    return re.sub(r"(?<=[\]A-Za-z}$]) (?=\d)", "~", out)


def _protect(cell):
    """``{}`` before a cell starting with ``[`` (after ``\\\\`` it would be an optional argument)."""
    cell = str(cell)
    return "{}" + cell if cell.lstrip().startswith("[") else cell


def _comment(text):
    return "% " + "".join(ch if ch.isprintable() else " " for ch in str(text))


def render_table(headings, units, rows, caption, notes, style="latex", align=None, comments=(),
                 label="tab:zline-lines"):
    """A whole LaTeX table as text.

    Parameters
    ----------
    headings : list of str
        Column headings, already LaTeX.
    units : list of str
        One per column, already LaTeX ("" for none); shown in parentheses on a second row.
    rows : list of list of str
        Cells, already LaTeX.
    caption : str
        Caption, already LaTeX.
    notes : list of str
        Sentences, already LaTeX: a footnote paragraph (latex) or ``\\tablecomments`` (aastex).
    style : {"latex", "aastex"}
        A ``table`` float with a ``tabular`` (any LaTeX class) or an AASTeX ``deluxetable*``.
    align : str, optional
        Column alignment (default ``l`` then ``r``).
    comments : iterable of str
        Lines written as TeX comments at the top (provenance).
    label : str
        ``\\label`` of the table.
    """
    ncol = len(headings)
    align = align or "l" + "r" * (ncol - 1)
    out = [_comment(c) for c in comments]
    body = [" & ".join(_protect(c) for c in row) for row in rows]
    unit_row = [f"({u})" if u else "" for u in units]
    note = " ".join(n for n in notes if n)
    if style == "aastex":
        out.append(f"\\begin{{deluxetable*}}{{{align}}}")
        out.append(f"\\tablecaption{{{caption}\\label{{{label}}}}}")
        head = " & ".join(f"\\colhead{{{h}}}" for h in headings)
        if any(units):
            head += " \\\\\n  " + " & ".join(f"\\colhead{{{u}}}" for u in unit_row)
        out.append(f"\\tablehead{{{head}}}")
        out.append("\\startdata")
        out.append(" \\\\\n".join(body))
        out.append("\\enddata")
        if note:
            out.append(f"\\tablecomments{{{note}}}")
        out.append("\\end{deluxetable*}")
    elif style == "latex":
        out.append("\\begin{table}")
        out.append("\\centering")
        out.append(f"\\caption{{{caption}}}\\label{{{label}}}")
        out.append(f"\\begin{{tabular}}{{{align}}}")
        out.append("\\hline")
        out.append(" & ".join(headings) + " \\\\")
        if any(units):
            out.append(" & ".join(unit_row) + " \\\\")
        out.append("\\hline")
        out.extend(row + " \\\\" for row in body)
        out.append("\\hline")
        out.append("\\end{tabular}")
        if note:
            out.append("\\par\\smallskip")
            out.append(f"\\parbox{{0.9\\linewidth}}{{\\footnotesize {note}}}")
        out.append("\\end{table}")
    else:
        raise ValueError(f"render_table: unknown style {style!r}; options: aastex, latex")
    return "\n".join(out) + "\n"
