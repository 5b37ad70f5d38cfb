"""Line tables for a paper: measured lines with units and provenance, written safely.

`line_table_for_paper` turns locked identifications or line fits into a `~astropy.table.QTable`
whose meta records the redshift solution, the medium and the source file (with its SHA-256).
`write_table` writes it atomically as ECSV, FITS, CSV, LaTeX or AASTeX, and replaces an existing
file only when asked *and* the file is a zline table of the same kind (`zline.physics._atomic`).
The LaTeX and AASTeX writers (`latex_table_text`) round every value to the precision set by its
uncertainty (`format_value_error`), escape all text (`latex_escape`), typeset line labels
(`latex_label`: ``H$\\alpha$``, ``[O\\,\\textsc{iii}]``), put units in the column headings and
give z with its error, the velocity convention, the medium, the line set and the level model in
the table notes.

Rounding rule (`format_value_error`): the error keeps 2 significant digits when its leading
digit is 1 or 2, else 1; the value is rounded to the same decimal place.  Examples:
``6564.6132 +- 0.0123 -> 6564.613 +- 0.012``; ``1234.5 +- 67 -> 1230 +- 70``;
``1.23456 +- 0.0096 -> 1.235 +- 0.010`` (an error that rounds up to a leading 1 keeps 2 digits).
"""

import datetime
import math
import os

import astropy.units as u
import numpy as np
from astropy.table import QTable

from zline.physics._atomic import LATEX_MARKER, TABLE_MARKER, file_sha256
from zline.physics.constants import CODATA_RELEASE
from zline.physics.fitting import LineFit
from zline.physics.identify import Lock
from zline.physics.latex import GREEK, latex_escape, latex_label, render_table

__all__ = ["TABLE_FORMATS", "line_table_for_paper", "write_table", "read_table", "format_value_error",
           "latex_escape", "latex_label", "latex_table_text", "file_sha256"]

#: Format name -> what is written.
TABLE_FORMATS = {
    "ecsv": "astropy ECSV (units, meta kept)",
    "fits": "FITS binary table (units kept, meta in the header)",
    "csv": "plain comma separated values (no units, no meta)",
    "latex": "LaTeX tabular, values rounded by their errors, text escaped",
    "aastex": "AASTeX deluxetable, values rounded by their errors, text escaped",
}
_ASTROPY_FORMAT = {"ecsv": "ascii.ecsv", "fits": "fits", "csv": "ascii.csv",
                   "latex": "ascii.latex", "aastex": "ascii.aastex"}
_KMS = u.km / u.s


def _zline_version():
    from zline import __version__
    return str(__version__)


# --------------------------------------------------------------------------------------------
# rows


def _row_from(item, index):
    """(label, species, rest, medium, LineFit|None, observed, observed_err, detected, limit)."""
    if isinstance(item, Lock):
        return (item.label, item.species, item.rest, item.medium, item.fit, item.observed,
                item.observed_err, True, None)
    if isinstance(item, LineFit):
        return (item.label or f"line {index}", "", None, None, item, item.center,
                item.center_err, item.detected, item.upper_limit)
    if isinstance(item, dict):
        fit = item.get("fit")
        if fit is not None and not isinstance(fit, LineFit):
            raise TypeError(f"line_table_for_paper: item {index} key 'fit' must be a LineFit, "
                            f"got {type(fit).__name__}")
        label = item.get("label") or (fit.label if fit is not None else "") or f"line {index}"
        observed = item.get("observed", fit.center if fit is not None else None)
        observed_err = item.get("observed_err", fit.center_err if fit is not None else None)
        detected = item.get("detected", fit.detected if fit is not None else True)
        limit = item.get("limit", fit.upper_limit if fit is not None else None)
        return (label, item.get("species", ""), item.get("rest"), item.get("medium"), fit,
                observed, observed_err, bool(detected), limit)
    raise TypeError(f"line_table_for_paper: item {index} must be a Lock, a LineFit or a dict "
                    f"with keys label, rest, fit; got {type(item).__name__}")


def _to(q, unit, equiv=None):
    if q is None or unit is None:
        return np.nan
    try:
        return float(u.Quantity(q).to_value(unit, equivalencies=equiv or []))
    except u.UnitConversionError:
        return np.nan


def _err_to(err, value, unit):
    """An error (spectral unit or km/s) at ``value`` (in ``unit``) expressed in ``unit``."""
    if err is None:
        return np.nan
    err = u.Quantity(err)
    if err.unit.physical_type == "speed":
        return abs(err.to_value(_KMS)) / 299792.458 * abs(value)
    return abs(_to(err, unit, u.spectral()))


def line_table_for_paper(locks_or_fits, solution=None, spectrum=None, settings=None):
    """Table of measured lines with units and provenance, ready for `write_table`.

    Parameters
    ----------
    locks_or_fits : iterable of `~zline.physics.identify.Lock`, `~zline.physics.fitting.LineFit` or dict
        One row per item.  A dict holds ``label``, ``rest`` (Quantity), ``fit`` (LineFit) and
        optionally ``species``, ``medium``, ``observed``, ``observed_err``, ``detected`` (bool)
        and ``limit`` (3-sigma flux upper limit of an undetected line).
    solution : `~zline.physics.identify.RedshiftSolution`, optional
        Gives ``z``, ``z_err``, the convention and the per-line velocity residuals.
    spectrum : `specutils.Spectrum`, optional
        Source of provenance: ``meta["zline"]`` file, HDU, medium; the file's SHA-256.
    settings : dict, optional
        Extra facts: ``frame`` (e.g. "LSRK"), ``medium``, ``air_formula``, ``convention``,
        ``ebv`` (E(B-V), adds a dereddened flux column, see `zline.physics.nebular.deredden`),
        ``r_v``, ``caption``, ``line_set`` (name of the set the lines came from) and
        ``level_model`` (the `zline.physics.levels` model of the hydrogen-like positions); all
        land in the meta and the LaTeX table notes.

    Returns
    -------
    `~astropy.table.QTable`
        Columns ``label, species, rest, observed, observed_err, flux, flux_err, ew, ew_err,
        fwhm_kms, fwhm_kms_err, snr, residual_kms, upper_limit, flux_limit`` (+ ``flux_dered``,
        ``flux_dered_err`` with ``ebv``); missing values are NaN.  ``upper_limit`` is True for
        undetected lines (``flux_limit`` then holds the 3-sigma limit).  A Lock counts as
        detected; a LineFit by its S/N.
    """
    settings = dict(settings or {})
    known = {"frame", "medium", "air_formula", "convention", "ebv", "ebv_err", "r_v", "caption",
             "line_set", "level_model"}
    unknown = set(settings) - known
    if unknown:
        raise ValueError(f"line_table_for_paper: unknown settings {sorted(unknown)}; options: "
                         f"{sorted(known)}")
    rows = [_row_from(item, i) for i, item in enumerate(locks_or_fits)]
    if not rows:
        raise ValueError("line_table_for_paper: 'locks_or_fits' is empty; give at least one line")

    def first_unit(getter):
        for r in rows:
            q = getter(r)
            if q is not None:
                return u.Quantity(q).unit
        return None

    s_unit = first_unit(lambda r: r[5]) or u.AA
    r_unit = first_unit(lambda r: r[2]) or s_unit
    f_unit = first_unit(lambda r: r[4].flux if r[4] is not None else None)
    ew_unit = first_unit(lambda r: r[4].ew if r[4] is not None else None)

    resid = {}
    if solution is not None:
        for lab, res in zip(solution.labels, solution.residuals):
            resid[lab] = res.to_value(_KMS)

    cols = {k: [] for k in ("label", "species", "rest", "observed", "observed_err", "flux",
                            "flux_err", "ew", "ew_err", "fwhm_kms", "fwhm_kms_err", "snr",
                            "residual_kms", "upper_limit", "flux_limit")}
    for label, species, rest, _medium, fit, obs, obs_err, detected, limit in rows:
        cols["label"].append(str(label))
        cols["species"].append(str(species or ""))
        cols["rest"].append(_to(rest, r_unit, u.spectral()))
        ov = _to(obs, s_unit, u.spectral())
        cols["observed"].append(ov)
        cols["observed_err"].append(_err_to(obs_err, ov, s_unit))
        if fit is not None:
            cols["flux"].append(_to(fit.flux, f_unit))
            cols["flux_err"].append(_to(fit.flux_err, f_unit))
            cols["ew"].append(_to(fit.ew, ew_unit))
            cols["ew_err"].append(_to(fit.ew_err, ew_unit))
            cols["fwhm_kms"].append(_to(fit.fwhm_kms, _KMS))
            cols["fwhm_kms_err"].append(_to(fit.fwhm_kms_err, _KMS))
            cols["snr"].append(float(fit.snr))
            if not detected and limit is None:
                limit = 3.0 * fit.flux_err
            cols["upper_limit"].append(not detected)
            cols["flux_limit"].append(_to(limit, f_unit) if not detected else np.nan)
        else:
            for key in ("flux", "flux_err", "ew", "ew_err", "fwhm_kms", "fwhm_kms_err", "snr",
                        "flux_limit"):
                cols[key].append(np.nan)
            cols["upper_limit"].append(False)
        cols["residual_kms"].append(resid.get(label, np.nan))

    t = QTable()
    t["label"] = cols["label"]
    t["species"] = cols["species"]
    t["rest"] = np.array(cols["rest"]) * r_unit
    t["observed"] = np.array(cols["observed"]) * s_unit
    t["observed_err"] = np.array(cols["observed_err"]) * s_unit
    fu = f_unit if f_unit is not None else u.dimensionless_unscaled
    t["flux"] = np.array(cols["flux"]) * fu
    t["flux_err"] = np.array(cols["flux_err"]) * fu
    eu = ew_unit if ew_unit is not None else s_unit
    t["ew"] = np.array(cols["ew"]) * eu
    t["ew_err"] = np.array(cols["ew_err"]) * eu
    t["fwhm_kms"] = np.array(cols["fwhm_kms"]) * _KMS
    t["fwhm_kms_err"] = np.array(cols["fwhm_kms_err"]) * _KMS
    t["snr"] = np.array(cols["snr"], dtype=float)
    t["residual_kms"] = np.array(cols["residual_kms"]) * _KMS
    t["upper_limit"] = np.array(cols["upper_limit"], dtype=bool)
    t["flux_limit"] = np.array(cols["flux_limit"]) * fu
    descriptions = {
        "rest": "rest position", "observed": "fitted observed centre",
        "observed_err": "1-sigma error of observed", "flux": "integrated line flux",
        "ew": "equivalent width (positive for absorption, negative for emission)", "fwhm_kms": "FWHM as a velocity",
        "snr": "flux / flux_err", "residual_kms": "velocity residual from the solution",
        "upper_limit": "True: not detected (snr < 3)", "flux_limit": "3-sigma flux upper limit",
    }
    for name, text in descriptions.items():
        t[name].info.description = text

    # provenance
    meta = {}
    zmeta = dict(getattr(spectrum, "meta", {}).get("zline", {})) if spectrum is not None else {}
    media = {r[3] for r in rows if r[3]}
    medium = settings.get("medium") or zmeta.get("medium") or (media.pop() if len(media) == 1
                                                               else None)
    if solution is not None:
        meta["z"] = float(solution.z)
        meta["z_err"] = float(solution.z_err)
        meta["velocity"] = float(solution.velocity.to_value(_KMS))
        meta["velocity_err"] = float(solution.velocity_err.to_value(_KMS))
        meta["velocity_unit"] = "km / s"
        meta["chi2_dof"] = None if not np.isfinite(solution.chi2_dof) else float(solution.chi2_dof)
        meta["convention"] = solution.convention
    else:
        meta["z"] = None
        meta["z_err"] = None
        meta["convention"] = settings.get("convention")
    header = zmeta.get("header") or {}
    meta["frame"] = settings.get("frame") or header.get("SPECSYS") or "unknown"
    meta["medium"] = medium or "unknown"
    meta["air_formula"] = settings.get("air_formula", "morton2000") if medium == "air" else None
    meta["constants"] = CODATA_RELEASE
    path = zmeta.get("file")
    meta["source_file"] = str(path) if path else None
    meta["source_hdu"] = zmeta.get("hdu")
    meta["source_sha256"] = (file_sha256(path) if path and os.path.isfile(str(path)) else None)
    meta["zline_version"] = _zline_version()
    meta["date"] = datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds")
    if settings.get("caption"):
        meta["caption"] = str(settings["caption"])
    for key in ("line_set", "level_model"):
        if settings.get(key):
            meta[key] = str(settings[key])

    ebv = settings.get("ebv")
    if ebv is not None:
        from zline.physics.nebular import k_lambda

        r_v = float(settings.get("r_v", 3.1))
        curve = "ccm89"
        ebv_err = settings.get("ebv_err", 0.0)
        ebv = float(ebv.to_value(u.mag) if isinstance(ebv, u.Quantity) else ebv)
        ebv_err = float(ebv_err.to_value(u.mag) if isinstance(ebv_err, u.Quantity) else ebv_err)
        kk = k_lambda(u.Quantity(t["rest"]), r_v, curve)
        corr = 10.0 ** (0.4 * kk * float(ebv))
        corr_err = corr * 0.4 * math.log(10.0) * kk * ebv_err
        t["flux_dered"] = t["flux"] * corr
        rel = np.hypot(np.asarray(t["flux_err"].value) / np.asarray(t["flux"].value),
                       corr_err / corr)
        t["flux_dered_err"] = np.abs(t["flux_dered"]) * rel
        t["flux_dered"].info.description = "flux corrected for extinction (CCM89)"
        meta["ebv"] = float(ebv)
        meta["ebv_err"] = ebv_err
        meta["r_v"] = r_v
        meta["extinction_curve"] = curve
    t.meta.update(meta)
    return t


# --------------------------------------------------------------------------------------------
# formatting


def _decimals(err):
    """Decimal place (digits after the point, may be negative) of an error under the rule."""
    exp = math.floor(math.log10(err))
    lead = int(err / 10.0**exp + 1e-9)
    ndig = 2 if lead in (1, 2) else 1
    dec = ndig - 1 - exp
    rounded = round(err, dec)
    if rounded > 0 and math.floor(math.log10(rounded)) > exp:  # 9.6 -> 10: leading 1, 2 digits
        exp2 = math.floor(math.log10(rounded))
        dec = 2 - 1 - exp2
    return dec


def _fmt(x, dec):
    if dec > 0:
        return f"{round(x, dec):.{dec}f}"
    return f"{int(round(x, dec)):d}"


def format_value_error(value, error):
    """Round ``value +- error`` by the error (see the module docstring for the rule).

    Parameters
    ----------
    value, error : float
        Plain numbers in the same unit.

    Returns
    -------
    (str, str)
        Rounded value and error; a non-finite or non-positive error gives the value with 6
        significant digits and ``""``.
    """
    value = float(value)
    error = abs(float(error)) if error is not None else float("nan")
    if not np.isfinite(value):
        return "", ""
    if not (np.isfinite(error) and error > 0):
        return f"{value:.6g}", ""
    dec = _decimals(error)
    return _fmt(value, dec), _fmt(error, dec)


def _latex_unit(unit):
    if unit is None or unit == u.dimensionless_unscaled:
        return ""
    return unit.to_string("latex_inline")


_SYMBOL = {"length": r"\lambda", "frequency": r"\nu", "energy": "E", "wavenumber": r"\sigma"}
_HEADINGS = {"label": "Line", "species": "Ion", "flux": "Flux", "ew": "EW", "fwhm_kms": "FWHM",
             "snr": "S/N", "residual_kms": r"$\Delta v$", "flux_dered": "Dereddened flux"}


def _heading(name, unit):
    if name in ("rest", "observed"):
        symbol = _SYMBOL.get(str(unit.physical_type) if unit is not None else "", "x")
        return f"${symbol}_{{\\mathrm{{{'rest' if name == 'rest' else 'obs'}}}}}$"
    return _HEADINGS[name]


def _cells_value_error(values, errors):
    cells = []
    for v, e in zip(values, errors):
        sv, se = format_value_error(v, e) if np.isfinite(v) else ("", "")
        cells.append(f"${sv} \\pm {se}$" if se else sv)
    return cells


def _latex_columns(table):
    """[(heading, unit LaTeX, cells)] of a line table: values rounded by their errors."""
    cols = [(_heading("label", None), "", [latex_label(v) for v in table["label"]])]
    if "species" in table.colnames and any(str(s) for s in table["species"]):
        cols.append((_heading("species", None), "", [latex_label(v) for v in table["species"]]))
    limits = np.asarray(table["upper_limit"], dtype=bool) if "upper_limit" in table.colnames \
        else np.zeros(len(table), bool)
    for name, err_name in [("rest", None), ("observed", "observed_err"), ("flux", "flux_err"),
                           ("ew", "ew_err"), ("fwhm_kms", "fwhm_kms_err")]:
        if name not in table.colnames:
            continue
        col = u.Quantity(table[name])
        if not np.any(np.isfinite(col.value)) and not (name == "flux" and limits.any()):
            continue
        if name == "rest":
            cells = [f"{v:.3f}" if np.isfinite(v) else "" for v in col.value]
        else:
            errs = (u.Quantity(table[err_name]).to_value(col.unit) if err_name in table.colnames
                    else np.full(len(table), np.nan))
            cells = _cells_value_error(col.value, errs)
        if name == "flux" and "flux_limit" in table.colnames:
            lims = u.Quantity(table["flux_limit"]).to_value(col.unit)
            for i in np.flatnonzero(limits):
                cells[i] = f"$<{float(lims[i]):.2g}$" if np.isfinite(lims[i]) else ""
        cols.append((_heading(name, col.unit), _latex_unit(col.unit), cells))
    if "snr" in table.colnames:
        cols.append((_heading("snr", None), "",
                     [f"{v:.1f}" if np.isfinite(v) else "" for v in np.asarray(table["snr"])]))
    if "residual_kms" in table.colnames:
        col = u.Quantity(table["residual_kms"])
        if np.any(np.isfinite(col.value)):
            cols.append((_heading("residual_kms", None), _latex_unit(col.unit),
                         [f"{v:.1f}" if np.isfinite(v) else "" for v in col.value]))
    if "flux_dered" in table.colnames:
        col = u.Quantity(table["flux_dered"])
        errs = u.Quantity(table["flux_dered_err"]).to_value(col.unit)
        cols.append((_heading("flux_dered", None), _latex_unit(col.unit),
                     _cells_value_error(col.value, errs)))
    return cols


def _finite(x):
    try:
        x = float(x)
    except (TypeError, ValueError):
        return None
    return x if np.isfinite(x) else None


def _value_text(symbol, value, error):
    sv, se = format_value_error(value, error if error is not None else float("nan"))
    return f"${symbol} = {sv} \\pm {se}$" if se else f"${symbol} = {sv}$"


def _latex_notes(table):
    """Sentences for the table notes: z +- sigma, convention, medium, line set, level model."""
    meta = table.meta
    esc = latex_escape
    notes = []
    z, conv = _finite(meta.get("z")), meta.get("convention")
    if z is not None:
        text = _value_text("z", z, _finite(meta.get("z_err")))
        v = _finite(meta.get("velocity"))
        if v is not None:
            text += ", " + _value_text("v", v, _finite(meta.get("velocity_err"))) + " km\\,s$^{-1}$"
        if conv:
            text += f" ({esc(conv)} velocity convention)"
        notes.append(text + ".")
    elif conv:
        notes.append(f"Velocities in the {esc(conv)} convention.")
    medium = meta.get("medium")
    if medium and medium != "unknown":
        text = f"Rest positions in {esc(medium)}"
        if medium == "air" and meta.get("air_formula"):
            text += f" (converted from vacuum with the {esc(meta['air_formula'])} formula)"
        notes.append(text + ".")
    else:
        notes.append("Medium (air or vacuum) of the rest positions not known.")
    if meta.get("line_set"):
        notes.append(f"Line set: {esc(meta['line_set'])}.")
    if meta.get("level_model"):
        notes.append(f"Hydrogen-like rest positions from the {esc(meta['level_model'])} level "
                     f"model.")
    if meta.get("frame") and meta.get("frame") != "unknown":
        notes.append(f"Velocity frame: {esc(meta['frame'])}.")
    if meta.get("constants"):
        notes.append(f"Constants: {esc(meta['constants'])}.")
    if "upper_limit" in table.colnames and np.any(np.asarray(table["upper_limit"], dtype=bool)):
        notes.append("Upper limits are 3$\\sigma$.")
    if _finite(meta.get("ebv")) is not None:
        notes.append(f"Dereddened with {_value_text('E(B-V)', meta['ebv'], _finite(meta.get('ebv_err')))}"
                     f" ({esc(str(meta.get('extinction_curve', '')).upper())}, "
                     f"$R_V = {_finite(meta.get('r_v')) or 3.1:.3g}$).")
    return notes


def latex_table_text(table, style="latex"):
    """A line table as LaTeX (``style="latex"``) or AASTeX (``"aastex"``) text.

    Values are rounded by their errors, labels typeset (`latex_label`), headings carry units and
    the notes give z with its error, the velocity convention, the medium, the line set and the
    level model from ``table.meta``.  The text starts with the TeX comment ``% zline line table``.
    """
    cols = _latex_columns(table)
    rows = [[c[2][i] for c in cols] for i in range(len(table))]
    meta = table.meta
    if meta.get("caption"):
        caption = latex_escape(meta["caption"])
    elif meta.get("source_file"):
        caption = f"Lines measured in {latex_escape(os.path.basename(str(meta['source_file'])))}"
    else:
        caption = "Measured lines"
    comments = [LATEX_MARKER[2:],
                f"written by zline {meta.get('zline_version') or _zline_version()}"
                f" on {meta.get('date', '')}"]
    if meta.get("source_file"):
        comments.append(f"source: {meta['source_file']} HDU {meta.get('source_hdu')} "
                        f"SHA-256 {meta.get('source_sha256')}")
    return render_table([c[0] for c in cols], [c[1] for c in cols], rows, caption,
                        _latex_notes(table), style=style, comments=comments)



def _ascii(text):
    """FITS strings are ASCII: Greek letters spelled out, anything else as '?'."""
    text = "".join(GREEK.get(ch, ch) for ch in str(text))
    return text.encode("ascii", "replace").decode("ascii")


def _flat_meta(meta):
    """FITS-safe meta: scalars only (None -> 'none'), nested values as strings."""
    out = {}
    for k, v in meta.items():
        if v is None:
            v = "none"
        elif not isinstance(v, (str, int, float, bool, np.integer, np.floating, np.bool_)):
            v = str(v)
        out[k] = v
    return out


def write_table(table, path, format="ecsv", overwrite=False, kind=None):
    """Write a table atomically; never over a file zline did not write.

    Parameters
    ----------
    table : `~astropy.table.Table` or `~astropy.table.QTable`
        Usually from `line_table_for_paper`.
    path : str or path-like
        Target file.  A temporary file is written in the same directory and moved into place,
        so a reader never sees a half-written file.
    format : str
        One of `TABLE_FORMATS`.
    overwrite : bool
        Replace an existing file -- only one zline wrote as the same kind of table.
    kind : {"line-table", "catalog"}, optional
        What the table is (default: "catalog" when ``table.meta`` holds ``zline_batch``, else
        "line-table"); recorded in the file (meta ``zline_file``, a LaTeX comment) so a later
        ``overwrite`` can tell.

    Raises
    ------
    FileExistsError
        ``path`` exists and ``overwrite`` is False.
    zline.physics._atomic.NotZlineFileError
        ``path`` exists and is not a zline table of this kind (never replaced).
    ValueError
        Unknown format.
    """
    if format not in TABLE_FORMATS:
        raise ValueError(f"write_table: unknown format {format!r}; options: "
                         + ", ".join(f"{k} ({v})" for k, v in sorted(TABLE_FORMATS.items())))
    if kind is None:
        kind = "catalog" if "zline_batch" in table.meta else "line-table"
    if kind not in ("line-table", "catalog"):
        raise ValueError(f"write_table: unknown kind {kind!r}; options: catalog, line-table")
    path = os.fspath(path)
    exists = f"write_table: {path!r} exists; pass overwrite=True to replace it"
    if os.path.lexists(path) and not overwrite:
        raise FileExistsError(exists)
    text = None
    if format in ("latex", "aastex"):
        text = latex_table_text(table, style=format)
    elif format == "fits":
        to_write = QTable(table, copy=True)
        for name in to_write.colnames:
            if to_write[name].dtype.kind == "U":
                to_write[name] = [_ascii(v) for v in to_write[name]]
        to_write.meta.clear()
        to_write.meta.update({k: _ascii(v) if isinstance(v, str) else v
                              for k, v in _flat_meta(table.meta).items()})
    else:
        to_write = table.copy(copy_data=False)
    if format in ("ecsv", "fits") and kind == "line-table":
        to_write.meta[TABLE_MARKER] = kind
    import warnings

    from astropy.io.fits.verify import VerifyWarning

    from zline.physics._atomic import atomic_path

    with atomic_path(path, overwrite=overwrite, exists_message=exists, kind=kind) as tmp, \
            warnings.catch_warnings():
        if text is not None:
            with open(tmp, "w", encoding="utf-8") as fh:
                fh.write(text)
        else:
            # long meta keys become HIERARCH cards; astropy warns about each one
            warnings.filterwarnings("ignore", category=VerifyWarning)
            to_write.write(tmp, format=_ASTROPY_FORMAT[format], overwrite=True)
    return path


def read_table(path, format="ecsv"):
    """Read a table written by `write_table` (ECSV or FITS) back as a `~astropy.table.QTable`.

    FITS header keys come back upper-case and ``None`` as ``"none"``; both are undone here so the
    meta matches the table that was written.
    """
    if format not in ("ecsv", "fits"):
        raise ValueError(f"read_table: format {format!r} keeps no units; options: ecsv, fits")
    t = QTable.read(os.fspath(path), format=_ASTROPY_FORMAT[format])
    if format == "fits":
        meta = {}
        for k, v in t.meta.items():
            if k in ("COMMENT", "HISTORY"):
                continue
            meta[k.lower()] = None if v == "none" else v
        t.meta.clear()
        t.meta.update(meta)
    return t
