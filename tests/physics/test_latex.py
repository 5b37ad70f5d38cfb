"""LaTeX of paper tables: escaping, typeset labels, and tables that compile with Debian's texlive."""

import os
import shutil
import subprocess

import pytest

from zline.cli import main
from zline.physics.demo import write_demo_spectra
from zline.physics.latex import latex_escape, latex_label, render_table
from zline.physics.measure import measure_spectrum
from zline.physics.spectra import read_spectrum
from zline.physics.tables import write_table

IN_CI = os.environ.get("CI", "").lower() in {"1", "true", "yes"}

# Every TeX special character, a live command, a bare [ and non-ASCII text in one label each.
NASTY = [r"\input{evil}", r"$\input{evil}$", "{[}^~&%$#_ <>|", "[O III] 5007 after a row",
         "Lyα1 ± 5 Å, naïve café", r"\\[2pt] H\_a", "Fe XXVI Lyα1", "100% & 3 # _x^2~"]


@pytest.mark.parametrize("text, expected", [
    ("H_alpha & co", r"H\_alpha \& co"),
    ("50% #1 $5", r"50\% \#1 \$5"),
    ("H$\\beta$ 4861", "H$\\beta$ 4861"),          # harmless math is kept
    ("a\\_b", r"a\textbackslash{}\_b"),             # a backslash is text, always
    ("H$\\alpha$_x", "H$\\alpha$\\_x"),
    ("{x}", r"\{x\}"),
    ("a^b~c", r"a\textasciicircum{}b\textasciitilde{}c"),
    (r"\input{/etc/passwd}", r"\textbackslash{}input\{/etc/passwd\}"),
    (r"$\input{x}$", r"\$\textbackslash{}input\{x\}\$"),   # a command not on the list: no math
    (r"$\alpha}{$", r"\$\textbackslash{}alpha\}\{\$"),       # unbalanced braces: no math
    ("Hα", r"H$\alpha$"),
    ("5 Å", r"5 \AA{}"),
    ("café", r"caf\'{e}"),
    ("line\nbreak", "line break"),
])
def test_latex_escape(text, expected):
    assert latex_escape(text) == expected


@pytest.mark.parametrize("label, expected", [
    ("Hα", r"H$\alpha$"),
    ("[O III] 5007", r"[O\,\textsc{iii}]~5007"),
    ("C III] 1909", r"C\,\textsc{iii}]~1909"),
    ("He II 4686", r"He\,\textsc{ii}~4686"),
    ("Fe XXVI Lyα1", r"Fe\,\textsc{xxvi} Ly$\alpha_{1}$"),
    ("C100α", r"C100$\alpha$"),
    ("Pa10", "Pa10"),
    ("Na I D1", r"Na\,\textsc{i} D1"),
    ("H_alpha & co", r"H\_alpha \& co"),
    (r"\input{x}", r"\textbackslash{}input\{x\}"),
])
def test_latex_label(label, expected):
    assert latex_label(label) == expected


def test_row_starting_with_bracket_is_protected():
    text = render_table(["Line"], [""], [["H$\\beta$"], ["[O\\,\\textsc{iii}]"]], "c", [])
    assert "\\\\\n{}[O" in text
    with pytest.raises(ValueError, match="unknown style 'word'"):
        render_table(["a"], [""], [["1"]], "c", [], style="word")


# ------------------------------------------------------------------------------ compiling


def _aastex_class():
    for name in ("aastex7", "aastex701", "aastex631", "aastex63", "aastex62"):
        found = subprocess.run(["kpsewhich", f"{name}.cls"], capture_output=True, text=True)
        if found.returncode == 0 and found.stdout.strip():
            return name
    return None


@pytest.fixture(scope="module")
def tex():
    """pdflatex and the AASTeX class of Debian's texlive; missing: skip locally, fail in CI."""
    exe = shutil.which("pdflatex")
    cls = _aastex_class() if exe and shutil.which("kpsewhich") else None
    if exe is None or cls is None:
        msg = ("pdflatex or the AASTeX class not found (apt-get install --no-install-recommends "
               "texlive-latex-base texlive-publishers texlive-plain-generic "
               "texlive-fonts-recommended)")
        if IN_CI:
            pytest.fail(msg)
        pytest.skip(msg)
    return exe, cls


def _compile(tex, table_file, style):
    exe, cls = tex
    folder = os.path.dirname(table_file)
    # a file that stops the run if any label ever made TeX read it
    with open(os.path.join(folder, "evil.tex"), "w") as fh:
        fh.write("\\errmessage{a label was executed as TeX}\n")
    doc = os.path.join(folder, f"doc-{style}.tex")
    with open(doc, "w") as fh:
        fh.write(f"\\documentclass{{{'article' if style == 'latex' else cls}}}\n"
                 f"\\begin{{document}}\n\\input{{{os.path.basename(table_file)}}}\n"
                 f"\\end{{document}}\n")
    run = subprocess.run([exe, "-interaction=nonstopmode", "-halt-on-error", "-no-shell-escape",
                          os.path.basename(doc)], cwd=folder, capture_output=True, text=True,
                         timeout=300)
    log = open(doc[:-4] + ".log", encoding="latin-1").read()
    assert run.returncode == 0, log[-3000:]
    assert os.path.getsize(doc[:-4] + ".pdf") > 1000
    assert "evil.tex" not in log
    for bad in ("Undefined control sequence", "Missing character", "not set up for use",
                "Missing number", "Extra alignment tab"):
        assert bad not in log, bad
    return log


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    return write_demo_spectra(tmp_path_factory.mktemp("demo"))


@pytest.mark.parametrize("style", ["latex", "aastex"])
def test_nasty_labels_compile(tex, demo, tmp_path, style):
    m = measure_spectrum(read_spectrum(demo["galaxy"]), z=0.0734)
    t = m.table(settings={"caption": r"Lines of ZL-1 & co: 100% \input{evil} $x$"})
    t["label"] = NASTY + [str(v) for v in t["label"][len(NASTY):]]
    path = write_table(t, tmp_path / "lines.tex", format=style)
    _compile(tex, path, style)


@pytest.mark.parametrize("style", ["latex", "aastex"])
@pytest.mark.parametrize("name, z", [("galaxy", "0.0734"), ("nebula", "0.0179"),
                                     ("radio", "0"), ("xray", "0.0179")])
def test_measure_outputs_compile(tex, demo, tmp_path, capsys, style, name, z):
    out = tmp_path / "m.tex"
    code = main(["measure", str(demo[name]), "--z", z, "--format", style, "-o", str(out)])
    assert code == 0, capsys.readouterr().err
    text = out.read_text()
    assert "\\pm" in text and "velocity convention" in text and "Line set:" in text
    _compile(tex, str(out), style)
