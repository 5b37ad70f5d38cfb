"""Measure a spectrum at a trial redshift: find the lines, fit them in groups, solve z or v.

`measure_spectrum` is a pipeline of small steps:

1. `select_lines`: the lines of a set predicted inside the data at the trial ``z``/``velocity``.
2. `~zline.physics.linefind.find_shift`: one shift of the whole set within a search window
   (default `~zline.physics.linefind.search_window`: +-max(500 km/s, 5 resolution FWHM)).
3. `measure_group`, for each group of lines whose fit windows overlap
   (`~zline.physics.linefind.group_lines`): every line of the window in one model.  First the
   profiles are held at the found shift and width, which gives each line's S/N at its expected
   place (so a line that is not there is not found, and never a noise spike elsewhere); then the
   detected lines get their own centres (within ``tolerance``, at least half a resolution FWHM;
   broad lines half their FWHM),
   lines closer than ``blend`` share one shift, and each width class shares one velocity width
   between the resolution floor and the ceiling of its kind.
4. `~zline.physics.identify.solve_redshift` on the detected narrow lines (broad lines when the
   set has no detected narrow line) decides which class gives z and keeps the locks' weighted
   mean in ``search["locks_z"]``; then `~zline.physics.jointshift.joint_shift` gives ``z`` and
   ``z_err``: every line of that class, detected or not, moves with one shift searched over the
   whole search window (fluxes held to the class's sign, one common width integrated out), so
   no line's own centre, width or detection chases the noise.  Every line reports its offset
   from the result.

Lines not detected get upper limits (`zline.physics.fitting`, module docstring).
"""

from dataclasses import dataclass, field, replace

import astropy.units as u
import numpy as np
from astropy.constants import c as _c

from zline.physics._threads import one_blas_thread
from zline.physics.catalog import LINE_SETS, line_set
from zline.physics.fitgroup import fit_group
from zline.physics.fitting import (KINDS, SAMPLING_FWHM_PIXELS, WIDTH_CEILING, Component,
                                   resolution_fwhm)
from zline.physics.identify import Lock, RedshiftSolution, _velocity, solve_redshift
from zline.physics.jointshift import JointWindow, joint_shift
from zline.physics.kinematics import CONVENTIONS, observed_position
from zline.physics.linefind import find_shift, group_lines, line_class, search_window

__all__ = ["BLEND_DISTANCE", "Measurement", "measure_spectrum", "default_line_set",
           "select_lines", "measure_group", "FIT_HALF_WINDOW", "WIDTH_FREE_SNR"]

_KMS = u.km / u.s
_C_KMS = _c.to_value(_KMS)

#: Default ``blend`` of `measure_spectrum`: detected lines predicted closer than this share one
#: shift (doublets, close multiplets).
BLEND_DISTANCE = 500 * _KMS
#: Half width of a line's fit window: this many matched-filter FWHM, at least 12 pixels.
FIT_HALF_WINDOW = 4.0
#: A width class of a group fits its own FWHM only when one of its detected lines has at least
#: this S/N; otherwise the FWHM found for the whole set is held.
WIDTH_FREE_SNR = 5.0

#: Physical type of the spectral axis -> default line set.
DEFAULT_SETS = {"length": "galaxy-emission", "wavenumber": "galaxy-emission",
                "frequency": "radio", "energy": "xray"}


def default_line_set(spectrum):
    """Name of the line set that suits the spectral axis (see `DEFAULT_SETS`)."""
    ptype = u.Quantity(spectrum.spectral_axis).unit.physical_type
    for name, set_name in DEFAULT_SETS.items():
        if ptype == name:
            return set_name
    raise ValueError(f"measure_spectrum: spectral axis of physical type {str(ptype)!r} has no "
                     f"default line set; expected one of {sorted(DEFAULT_SETS)}")


@dataclass
class Measurement:
    """Result of `measure_spectrum`.

    Attributes
    ----------
    z, z_err : float
        Solved redshift (nan without a detected line).
    velocity, velocity_err : `~astropy.units.Quantity` ['speed']
        The same shift as a velocity in ``convention``.
    convention : str
        Velocity convention.
    solution : `~zline.physics.identify.RedshiftSolution` or None
        None when no line was detected.
    locks : list of `~zline.physics.identify.Lock`
        Detected lines.
    lines : list of dict
        Every line fitted: ``label, species, rest, predicted, fit, detected, medium, reason,
        blend`` (``blend``: labels of the lines fitted together with this one, empty if alone),
        ``cls`` (emission, absorption or broad), ``used_for_z`` and ``offset_kms`` (fitted
        centre against the solution; broad-line offsets are reported here).
    line_set : str
        Name of the set used (or ``"custom"``).
    medium : str
        Medium of the rest positions.
    spectrum : `specutils.Spectrum`
        The measured spectrum.
    level_model : str or None
        Level model of the set's computed hydrogen-like positions (None if not known).
    search : dict
        ``window`` (km/s), ``shift`` (km/s found from the trial), ``found``, ``fwhm`` per class
        and ``resolution`` (where the FWHM floor comes from); with a z also ``locks_z``,
        ``locks_z_err`` (weighted mean of the locks), ``joint`` (True when z comes from the
        joint shift), ``joint_snr`` (joint S/N of the lines that gave it) and ``joint_fwhm``
        (their best common FWHM).
    """

    z: float
    z_err: float
    velocity: u.Quantity
    velocity_err: u.Quantity
    convention: str
    solution: RedshiftSolution | None
    locks: list
    lines: list
    line_set: str
    medium: str
    spectrum: object = field(default=None, repr=False)
    level_model: str | None = None
    search: dict = field(default_factory=dict)

    def table(self, settings=None):
        """Paper table of all lines (`zline.physics.tables.line_table_for_paper`)."""
        from zline.physics.tables import line_table_for_paper

        items = [{"label": r["label"], "species": r["species"], "rest": r["rest"],
                  "fit": r["fit"], "medium": r["medium"], "detected": r["detected"],
                  "limit": None if r["detected"] else r["limit"]} for r in self.lines]
        settings = dict(settings or {})
        settings.setdefault("medium", self.medium)
        settings.setdefault("convention", self.convention)
        settings.setdefault("line_set", self.line_set)
        if self.level_model:
            settings.setdefault("level_model", self.level_model)
        return line_table_for_paper(items, self.solution, self.spectrum, settings)

    def to_dict(self):
        """Plain-JSON dict: ``z, z_err, velocity, velocity_err`` (km/s), ``convention``,
        ``line_set``, ``medium``, units and ``lines`` (one dict per fitted line)."""
        def num(x):
            x = float(x)
            return x if np.isfinite(x) else None

        resid = {}
        if self.solution is not None:
            resid = dict(zip(self.solution.labels, self.solution.residuals.to_value(_KMS)))
        s_unit = u.Quantity(self.spectrum.spectral_axis).unit if self.spectrum is not None else None
        lines = []
        for r in self.lines:
            fit = r["fit"]
            lines.append({
                "label": r["label"], "species": r["species"],
                "rest": num(r["rest"].to_value(s_unit, equivalencies=u.spectral())),
                "predicted": num(r["predicted"].value),
                "observed": num(fit.center.value), "observed_err": num(fit.center_err.value),
                "flux": num(fit.flux.value), "flux_err": num(fit.flux_err.value),
                "ew": num(fit.ew.value), "ew_err": num(fit.ew_err.value),
                "fwhm_kms": num(fit.fwhm_kms.to_value(_KMS)),
                "fwhm_kms_err": num(fit.fwhm_kms_err.to_value(_KMS)),
                "snr": num(fit.snr),
                "residual_kms": num(resid[r["label"]]) if r["label"] in resid else None,
                "detected": bool(r["detected"]),
                "upper_limit": (None if r["detected"] else num(r["limit"].value)),
                "note": r["reason"],
                "blend": list(r.get("blend", [])),
                "class": r.get("cls", ""), "measured": bool(fit.measured),
                "used_for_z": bool(r.get("used_for_z", False)),
                "offset_kms": num(r.get("offset_kms", np.nan)),
                "fwhm_floor_kms": num(_C_KMS * fit.fwhm_floor.value / abs(fit.center.value))
                if fit.fwhm_floor is not None and fit.center.value else None,
            })
        flux_unit = self.lines[0]["fit"].flux.unit.to_string() if self.lines else None
        return {
            "z": num(self.z), "z_err": num(self.z_err),
            "velocity": num(self.velocity.to_value(_KMS)),
            "velocity_err": num(self.velocity_err.to_value(_KMS)),
            "velocity_unit": "km / s", "convention": self.convention,
            "line_set": self.line_set, "medium": self.medium,
            "n_detected": len(self.locks),
            "spectral_unit": None if s_unit is None else s_unit.to_string(),
            "flux_unit": flux_unit, "lines": lines,
            "search": {k: (num(v.to_value(_KMS)) if isinstance(v, u.Quantity) else
                           {c: num(q.to_value(_KMS)) for c, q in v.items()} if isinstance(v, dict)
                           else v) for k, v in self.search.items()},
        }


def _check_tolerance(tolerance, name="tolerance"):
    if not isinstance(tolerance, u.Quantity) or tolerance.unit.physical_type != "speed":
        raise TypeError(f"measure_spectrum: {name!r} must be a velocity Quantity (km/s), "
                        f"got {tolerance!r}")
    value = float(tolerance.to_value(_KMS))
    if not np.isfinite(value) or value < 0:
        raise ValueError(f"measure_spectrum: {name!r} must be finite and >= 0 km/s, got "
                         f"{tolerance!r}")
    return value


def select_lines(spectrum, lines, z, velocity, convention, min_strength=0.0):
    """The line set and the lines predicted inside the data at the trial shift.

    Returns
    -------
    dict
        ``table, set_name, medium, rest`` (spectral unit of the spectrum), ``predicted``,
        ``keep`` (row indices inside the data) and ``cls`` (`line_class` per kept row).
    """
    axis = u.Quantity(spectrum.spectral_axis)
    s_unit = axis.unit
    zmeta = spectrum.meta.get("zline", {}) if isinstance(getattr(spectrum, "meta", None), dict) \
        else {}
    is_length = s_unit.physical_type == "length"
    medium = (zmeta.get("medium") or "vacuum") if is_length else "vacuum"
    if lines is None:
        set_name = default_line_set(spectrum)
    elif isinstance(lines, str):
        if lines not in LINE_SETS:
            raise ValueError(f"measure_spectrum: unknown line set {lines!r}; options: "
                             f"{', '.join(sorted(LINE_SETS))}")
        set_name = lines
    else:
        set_name = "custom"
    if set_name == "custom":
        table = lines
        for col in ("label", "rest"):
            if col not in getattr(table, "colnames", []):
                raise ValueError(f"measure_spectrum: 'lines' table needs a {col!r} column; it "
                                 f"has {list(getattr(table, 'colnames', []))}")
    else:
        set_medium = medium if (is_length and medium == "air") else "vacuum"
        table = line_set(set_name, medium=set_medium, unit=s_unit if is_length or
                         set_name in ("radio", "xray") else None)
    rest = u.Quantity(table["rest"]).to(s_unit, equivalencies=u.spectral())
    predicted = observed_position(rest, z=float(z), velocity=velocity, convention=convention)
    good = np.isfinite(axis.value)
    lo, hi = np.nanmin(axis.value[good]), np.nanmax(axis.value[good])
    margin = 10 * float(np.median(np.abs(np.diff(axis.value[good]))))
    keep = [i for i in range(len(table))
            if lo + margin < float(predicted[i].value) < hi - margin
            and not ("strength" in table.colnames and float(table["strength"][i]) < min_strength)]
    cls = {i: line_class(table["kind"][i] if "kind" in table.colnames else "emission",
                         str(table["label"][i]), set_name) for i in keep}
    return dict(table=table, set_name=set_name, medium=medium, rest=rest, predicted=predicted,
                keep=keep, cls=cls)


def _shift_factor(unit, v_kms):
    f = 1.0 + v_kms / _C_KMS
    return f if unit.physical_type == "length" else 1.0 / f


def _clusters(idx, pos, blend_kms):
    """Runs of indices (sorted by position) closer than blend_kms to a neighbour."""
    out = []
    for i in sorted(idx, key=lambda i: pos[i]):
        if out and _C_KMS * abs(pos[i] - pos[out[-1][-1]]) / abs(pos[i]) < blend_kms:
            out[-1].append(i)
        else:
            out.append([i])
    return out


def measure_group(spectrum, group, sel, found, tol, blend_kms):
    """Fit one group of lines (all lines of its window together), held profiles then free.

    Parameters
    ----------
    spectrum : `specutils.Spectrum`
    group : list of int
        Rows of ``sel["table"]``.
    sel : dict
        From `select_lines`.
    found : `~zline.physics.linefind.FoundShift`
    tol, blend_kms : float
        ``tolerance`` and ``blend`` of `measure_spectrum` in km/s.

    Returns
    -------
    list of dict
        One row per line: ``label, fit, detected, reason, cls, group, shares`` (number of
        detected lines sharing its centre).
    """
    table, s_unit = sel["table"], u.Quantity(spectrum.spectral_axis).unit
    f = _shift_factor(s_unit, found.velocity.to_value(_KMS))
    pos = {i: float(sel["predicted"][i].value) * f for i in group}
    classes = sorted({sel["cls"][i] for i in group})
    gid = {c: k for k, c in enumerate(classes)}
    fw = {i: abs(pos[i]) * found.fwhm[sel["cls"][i]].to_value(_KMS) / _C_KMS for i in group}
    pix = {i: resolution_fwhm(spectrum, pos[i] * s_unit)[0].value / SAMPLING_FWHM_PIXELS
           for i in group}
    half = [max(FIT_HALF_WINDOW * fw[i], 12 * pix[i]) for i in group]
    lo = min(pos[i] - h for i, h in zip(group, half))
    hi = max(pos[i] + h for i, h in zip(group, half))
    labels = [str(table["label"][i]) for i in group]
    order = 1 if len(group) == 1 else 2

    def comps(detected, follow):
        out = []
        for k, i in enumerate(group):
            c = sel["cls"][i]
            if detected[k]:
                floor_kms = pix[i] * SAMPLING_FWHM_PIXELS / abs(pos[i]) * _C_KMS
                rng = max(tol, 0.5 * floor_kms,
                          0.5 * fw[i] / abs(pos[i]) * _C_KMS if c == "broad" else 0.0)
                mode = "follow" if k in follow else "free"
                out.append(Component(labels[k], pos[i] * s_unit, mode, sel["rest"][i],
                                     rng * _KMS, gid[c], fw[i] * s_unit, not free_width[c], c,
                                     follow.get(k)))
            else:
                fix = not free_width[c]
                out.append(Component(labels[k], pos[i] * s_unit, "fixed", sel["rest"][i], None,
                                     gid[c], fw[i] * s_unit, fix, c))
        return out

    held = [Component(lab, pos[i] * s_unit, "fixed", sel["rest"][i], None, gid[sel["cls"][i]],
                      fw[i] * s_unit, True, sel["cls"][i]) for lab, i in zip(labels, group)]
    fits = fit_group(spectrum, held, u.Quantity([lo, hi], s_unit), continuum_order=order)
    det = [fit.detected for fit in fits]
    reasons = [("" if d else fit.reason or
                (f"S/N {fit.snr:.1f} at the expected place, below 3" if not
                 (np.isfinite(fit.snr) and abs(fit.snr) >= 3) else "wrong sign for the line kind"))
               for d, fit in zip(det, fits)]
    follow, ratios, shares = {}, {}, [1] * len(group)
    for run in _clusters([k for k in range(len(group)) if det[k]],
                         {k: pos[i] for k, i in enumerate(group)}, blend_kms):
        lead = max(run, key=lambda k: fits[k].snr * (1 if sel["cls"][group[k]] != "absorption"
                                                     else -1))
        for k in run:
            shares[k] = len(run)
            if k == lead:
                continue
            follow[k] = lead
            close = abs(pos[group[k]] - pos[group[lead]]) < 0.5 * fw[group[lead]]
            if close and "strength" in table.colnames:
                s_k, s_l = float(table["strength"][group[k]]), float(table["strength"][group[lead]])
                if s_k > 0 and s_l > 0:
                    ratios[k] = (lead, s_k / s_l)
                    reasons[k] = (f"unresolved from {labels[lead]}: flux ratio fixed to the line "
                                  f"set's expected strengths")
    # a class fits its own width only with a line strong enough to fix it; weaker groups keep
    # the set's matched-filter FWHM (noise would otherwise narrow the profile and the errors)
    free_width = {c: any(det[k] and abs(fits[k].snr) >= WIDTH_FREE_SNR
                         for k, i in enumerate(group) if sel["cls"][i] == c) for c in classes}
    for k, i in enumerate(group):
        if det[k] and not free_width[sel["cls"][i]] and not reasons[k]:
            reasons[k] = "weak: FWHM held at the set's matched-filter value"
    if any(det):
        try:
            free = fit_group(spectrum, comps(det, follow), u.Quantity([lo, hi], s_unit),
                             continuum_order=order, ratios=ratios)
        except ValueError as exc:
            free = None
            reasons = [r or f"free fit failed: {exc}" for r in reasons]
        if free is not None:
            for k in range(len(group)):
                if det[k] and not free[k].detected:
                    det[k] = False
                    reasons[k] = (f"not measured: {free[k].reason}" if not free[k].measured
                                  else f"S/N {free[k].snr:.1f} in the free fit, below 3")
            fits = free
    return [dict(label=labels[k], fit=fits[k], detected=det[k], reason=reasons[k],
                 cls=sel["cls"][i], group=group[0], shares=shares[k],
                 blend=labels if len(group) > 1 else []) for k, i in enumerate(group)]


def _offsets(rows, sol, rest_of):
    for r in rows:
        r["offset_kms"] = np.nan
        if sol is None or not r["fit"].measured:
            continue
        obs = r["fit"].center.to_value(u.AA, equivalencies=u.spectral())
        rest = rest_of[r["label"]].to_value(u.AA, equivalencies=u.spectral())
        r["offset_kms"] = _C_KMS * (obs / (rest * (1.0 + sol.z)) - 1.0)


def _joint(spectrum, rows, sel, found, sol, label_row, span_kms, notes):
    """`joint_shift` of every line of the class used for z (detected or not) over the whole
    search span around the trial; None when not applicable (no flux errors, interval open).

    Its data windows reach each moving line's place at either end of the span plus
    `FIT_HALF_WINDOW` matched-filter FWHM (windows that overlap merge); the other lines inside
    stay at their fitted centres and widths with free fluxes.  ``notes`` (the search dict) gets
    ``joint_snr`` and ``joint_fwhm``."""
    from zline.physics.fitgroup import _window_data

    s_unit = u.Quantity(spectrum.spectral_axis).unit
    length = s_unit.physical_type == "length"
    cls = {r["cls"] for r in rows if r.get("used_for_z")}
    items, floors, ceils = [], [], []
    for r in rows:
        i, fit = label_row[r["label"]], r["fit"]
        pred = float(sel["predicted"][i].value)
        fw_found = abs(pred) * found.fwhm[r["cls"]].to_value(_KMS) / _C_KMS
        pix = resolution_fwhm(spectrum, pred * s_unit)[0].value / SAMPLING_FWHM_PIXELS
        # every emission line of the class moves, detected or not; of an absorption class only
        # the detected lines move: between absorption lines the continuum of a real galaxy or
        # star is itself made of unlisted absorption (metal blends, the G band beside Hγ), which
        # an undetected line allowed to move and widen would take for its own
        if r["cls"] in cls and (KINDS[r["cls"]] > 0 or r["detected"]):
            ends = [pred * _shift_factor(s_unit, d * span_kms) for d in (-1, 1)]
            half = max(FIT_HALF_WINDOW * fw_found, 12 * pix)
            base = fw_found
            if KINDS[r["cls"]] < 0:
                # absorption lines differ in width (damping wings of Ca II H and K, narrow Na I
                # D): each keeps its own fitted width and the width scale is common to all
                fw = float(fit.fwhm.to_value(s_unit))
                if np.isfinite(fw) and fw > 0:
                    base = fw
            items.append((min(ends) - half, max(ends) + half, pred, base, True,
                          KINDS[r["cls"]]))
            floors.append(float(fit.fwhm_floor.to_value(s_unit)) / base)
            ceils.append(WIDTH_CEILING[r["cls"]].to_value(_KMS) * abs(pred) / _C_KMS / base)
        else:
            c, fw = float(fit.center.to_value(s_unit)), float(fit.fwhm.to_value(s_unit))
            lo, hi = fit.window.to_value(s_unit)
            if not (fit.measured and lo <= c <= hi):
                c = pred * _shift_factor(s_unit, found.velocity.to_value(_KMS))
            if not (np.isfinite(fw) and fw > 0):
                fw = fw_found
            items.append((lo, hi, c, fw, False, 0))
    windows = []
    for run in group_lines([0.5 * (a + b) for a, b, *_ in items],
                           [0.5 * (b - a) for a, b, *_ in items]):
        lo = min(items[k][0] for k in run)
        hi = max(items[k][1] for k in run)
        x, y, err = _window_data(spectrum, lo, hi, None, rows[run[0]]["label"])
        if err is None:
            return None
        windows.append(JointWindow(x, y, err, 1 if len(run) == 1 else 2,
                                   np.array([items[k][2] for k in run]),
                                   np.array([items[k][3] / 2.3548200450309493 for k in run]),
                                   np.array([items[k][4] for k in run]),
                                   np.array([items[k][5] for k in run], dtype=float)))
    res = joint_shift(windows, 0.0, span_kms, length, min_scale=max(floors),
                      max_scale=min(min(ceils), 3.0))
    v, lo_err, hi_err = res.v, res.err_low, res.err_high
    notes["joint_snr"] = res.snr
    notes["joint_fwhm"] = res.width_scale * found.fwhm[sorted(cls)[0]]
    if not np.isfinite([v, lo_err, hi_err]).all():
        return None
    i = label_row[next(r["label"] for r in rows if r.get("used_for_z"))]
    pred, rest = float(sel["predicted"][i].value), float(sel["rest"][i].value)
    s_trial = pred / rest if length else rest / pred
    shift = s_trial * (1.0 + v / _C_KMS)
    rel_err = 0.5 * (lo_err + hi_err) / _C_KMS / (1.0 + v / _C_KMS)
    vel, dv = _velocity(shift, sol.convention)
    return replace(sol, z=shift - 1.0, z_err=shift * rel_err, velocity=vel * _KMS,
                   velocity_err=abs(dv) * rel_err * _KMS)


@one_blas_thread
def measure_spectrum(spectrum, z=0.0, velocity=0 * _KMS, convention="optical", lines=None, *,
                     tolerance=100 * _KMS, min_strength=0.0, solve_for=None,
                     blend=BLEND_DISTANCE, window=None):
    """Find the expected lines of a spectrum near a trial shift, fit them and solve the redshift.

    Parameters
    ----------
    spectrum : `specutils.Spectrum`
        1D spectrum (e.g. from `~zline.physics.spectra.read_spectrum`).
    z : float
        Trial redshift.
    velocity : `~astropy.units.Quantity` ['speed']
        Trial velocity on top of ``z``.
    convention : str
        One of `~zline.physics.kinematics.CONVENTIONS`.
    lines : str or `~astropy.table.QTable`, optional
        A set name of `~zline.physics.catalog.LINE_SETS` or a table with ``label`` and ``rest``
        (and optionally ``species``, ``kind``, ``strength``).  Default: by spectral axis
        (`DEFAULT_SETS`).  ``kind`` "absorption" lines must be absorbed, "broad" lines (and the
        permitted lines of a set named quasar) get the broad width class.
    tolerance : `~astropy.units.Quantity` ['speed']
        Largest offset of a narrow line's fitted centre from the set's found shift (at least half
        a resolution FWHM; broad lines half their FWHM); a centre that needs more is not
        measured.
    min_strength : float
        Skip lines of the set with a smaller ``strength``.
    solve_for : {"z", "velocity"}, optional
        Primary result; default ``"velocity"`` when ``z == 0`` else ``"z"``.
    blend : `~astropy.units.Quantity` ['speed']
        Detected lines predicted closer than this share one shift (lines closer than half their
        FWHM also their expected flux ratio); their locks' centre errors are scaled by
        sqrt(number sharing).  ``0 km/s``: every detected line has its own centre.  Lines whose
        fit windows overlap are always fitted together.
    window : `~astropy.units.Quantity` ['speed'], optional
        Search half-window around the trial; default
        `~zline.physics.linefind.search_window` (max(500 km/s, 5 resolution FWHM)).

    Returns
    -------
    Measurement
    """
    if getattr(spectrum, "spectral_axis", None) is None or getattr(spectrum, "flux", None) is None:
        raise TypeError(f"measure_spectrum: 'spectrum' must be a specutils.Spectrum, got "
                        f"{type(spectrum).__name__}")
    if isinstance(z, u.Quantity) or not np.isfinite(float(z)):
        raise TypeError(f"measure_spectrum: 'z' must be a plain finite number, got {z!r}")
    if not isinstance(velocity, u.Quantity) or velocity.unit.physical_type != "speed":
        raise TypeError(f"measure_spectrum: 'velocity' must be a velocity Quantity (km/s), got "
                        f"{velocity!r}")
    if convention not in CONVENTIONS:
        raise ValueError(f"measure_spectrum: unknown convention {convention!r}; options: "
                         f"{', '.join(sorted(CONVENTIONS))}")
    tol = _check_tolerance(tolerance)
    blend_kms = _check_tolerance(blend, "blend")
    win = None if window is None else _check_tolerance(window, "window") * _KMS
    sel = select_lines(spectrum, lines, z, velocity, convention, min_strength)
    table, keep, medium = sel["table"], sel["keep"], sel["medium"]
    s_unit = u.Quantity(spectrum.spectral_axis).unit
    rows, search = [], {}
    if keep:
        strengths = ([float(table["strength"][i]) for i in keep] if "strength" in table.colnames
                     else None)
        found = find_shift(spectrum, sel["predicted"][keep], [sel["cls"][i] for i in keep], win,
                           strengths)
        f = _shift_factor(s_unit, found.velocity.to_value(_KMS))
        half = []
        for i in keep:
            p = float(sel["predicted"][i].value) * f
            fwi = abs(p) * found.fwhm[sel["cls"][i]].to_value(_KMS) / _C_KMS
            pix = resolution_fwhm(spectrum, p * s_unit)[0].value / SAMPLING_FWHM_PIXELS
            half.append(max(FIT_HALF_WINDOW * fwi, 12 * pix))
        pos = [float(sel["predicted"][i].value) * f for i in keep]
        for g in group_lines(pos, half):
            group = [keep[k] for k in g]
            try:
                rows.extend(measure_group(spectrum, group, sel, found, tol, blend_kms))
            except ValueError:  # too few usable pixels (masked or edge): not measurable
                continue
        mid = sel["predicted"][keep[len(keep) // 2]]
        search = {"window": win if win is not None else search_window(spectrum,
                                                                      sel["predicted"][keep]),
                  "shift": found.velocity, "found": bool(found.found), "fwhm": found.fwhm,
                  "resolution": resolution_fwhm(spectrum, mid)[1]}
    label_row = {str(table["label"][i]): i for i in range(len(table))}
    narrow = [r for r in rows if r["detected"] and r["cls"] != "broad"]
    use = narrow or [r for r in rows if r["detected"]]
    locks = []
    for r in sorted(use, key=lambda r: float(sel["rest"][label_row[r["label"]]]
                                             .to_value(u.AA, u.spectral()))):
        i = label_row[r["label"]]
        species = str(table["species"][i]) if "species" in table.colnames else ""
        lock = Lock.from_fit(r["label"], sel["rest"][i], r["fit"], species=species, medium=medium)
        if r["shares"] > 1:
            lock.observed_err = lock.observed_err * np.sqrt(r["shares"])
            lock.note = "; ".join(filter(None, [r["reason"], f"one shift shared by "
                                                f"{r['shares']} lines; centre error x "
                                                f"sqrt({r['shares']})"]))
        r["used_for_z"] = True
        locks.append(lock)
    for r in rows:
        if r["detected"] and not r.get("used_for_z"):
            r["reason"] = r["reason"] or "broad line: offset reported, not used for z"
    if locks:
        solve_for = solve_for or ("velocity" if float(z) == 0.0 else "z")
        sol = solve_redshift(locks, convention=convention, solve_for=solve_for)
        search["locks_z"], search["locks_z_err"] = sol.z, sol.z_err
        joint = _joint(spectrum, rows, sel, found, sol, label_row,
                       search["window"].to_value(_KMS), search)
        search["joint"] = joint is not None
        sol = joint or sol
        zz, zerr, v, verr = sol.z, sol.z_err, sol.velocity, sol.velocity_err
    else:
        sol, zz, zerr = None, float("nan"), float("nan")
        v, verr = np.nan * _KMS, np.nan * _KMS
    rest_of = {str(table["label"][i]): sel["rest"][i] for i in range(len(table))}
    _offsets(rows, sol, rest_of)
    out = []
    for r in sorted(rows, key=lambda r: float(rest_of[r["label"]].to_value(u.AA, u.spectral()))):
        i, fit = label_row[r["label"]], r["fit"]
        limit = fit.upper_limit if fit.upper_limit is not None else 3.0 * abs(fit.flux_err)
        out.append({"label": r["label"],
                    "species": str(table["species"][i]) if "species" in table.colnames else "",
                    "rest": sel["rest"][i], "predicted": sel["predicted"][i], "fit": fit,
                    "detected": bool(r["detected"]), "limit": limit, "medium": medium,
                    "reason": r["reason"], "blend": r["blend"], "cls": r["cls"],
                    "used_for_z": bool(r.get("used_for_z")), "offset_kms": r["offset_kms"]})
    return Measurement(z=zz, z_err=zerr, velocity=v, velocity_err=verr, convention=convention,
                       solution=sol, locks=locks, lines=out, line_set=sel["set_name"],
                       medium=medium, spectrum=spectrum, search=search,
                       level_model=getattr(table, "meta", {}).get("model"))
