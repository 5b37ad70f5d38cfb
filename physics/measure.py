"""Measure a spectrum at a trial redshift: fit the expected lines, lock them, solve z or v.

`measure_spectrum` predicts where each line of a set falls at the trial ``z``/``velocity``, fits
every line inside the data with `~zline.physics.fitting.fit_line` (lines predicted closer than
``blend`` together, as one blend with a shared shift and width), locks the detected ones
(S/N >= 3, right sign, centre within ``tolerance`` of the prediction, not already claimed by a
closer line), solves the shift with `~zline.physics.identify.solve_redshift` and gives the
undetected lines 3-sigma flux upper limits.
"""

from dataclasses import dataclass, field

import astropy.units as u
import numpy as np
from astropy.constants import c as _c

from zline.physics.catalog import LINE_SETS, line_set
from zline.physics.fitting import fit_line
from zline.physics.identify import Lock, RedshiftSolution, solve_redshift
from zline.physics.kinematics import CONVENTIONS, observed_position

__all__ = ["BLEND_DISTANCE", "Measurement", "measure_spectrum", "default_line_set"]

_KMS = u.km / u.s
_C_KMS = _c.to_value(_KMS)

#: Default ``blend`` of `measure_spectrum`: lines predicted closer than this are fitted together.
BLEND_DISTANCE = 500 * _KMS

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
        blend`` (``blend``: labels of the lines fitted together with this one, empty if alone).
    line_set : str
        Name of the set used (or ``"custom"``).
    medium : str
        Medium of the rest positions.
    spectrum : `specutils.Spectrum`
        The measured spectrum.
    level_model : str or None
        Level model of the set's computed hydrogen-like positions (None if not known).
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


def _blend_groups(indices, predicted, blend_kms):
    """Split line indices into chains whose neighbours are predicted < ``blend_kms`` apart."""
    order = sorted(indices, key=lambda i: float(predicted[i].value))
    groups = []
    for i in order:
        if groups:
            prev = groups[-1][-1]
            a, b = float(predicted[prev].value), float(predicted[i].value)
            if _C_KMS * abs(b - a) / (0.5 * abs(a + b)) < blend_kms:
                groups[-1].append(i)
                continue
        groups.append([i])
    return groups


def _fit_group(spectrum, group, labels, predicted, rest_all, strengths=None):
    """Fit one line, or a blend with one shift and one velocity width; one LineFit per line.

    With ``strengths`` the flux ratios are fixed to them (relative to the strongest line).
    """
    if len(group) == 1:
        return [fit_line(spectrum, predicted[group[0]], label=labels[0])]
    ties = None
    if strengths is not None:
        ref = int(np.argmax(strengths))
        ties = {(k, ref): strengths[k] / strengths[ref] for k in range(len(group)) if k != ref}
    blend_fit = fit_line(spectrum, predicted[group[0]], label=labels[0], tie_width=True,
                         components={lab: rest_all[i] for lab, i in zip(labels, group)},
                         tie_ratio=ties)
    return list(blend_fit.components)


def _expected_strengths(table, group, kinds):
    """Expected strengths of a blend's lines (all positive, one kind), else None."""
    if "strength" not in table.colnames or len({kinds[i] for i in group}) != 1:
        return None
    s = np.array([float(table["strength"][i]) for i in group])
    return s if np.all(np.isfinite(s) & (s > 0)) else None


def _row(table, i, label, fit, predicted, rest_all, s_unit, kinds, tol, group, blend,
         reason=None):
    p = float(predicted[i].value)
    offset = _C_KMS * (float(fit.center.to_value(s_unit)) - p) / p
    if s_unit.physical_type in ("frequency", "energy", "wavenumber"):
        offset = -offset
    sign_ok = (fit.flux.value > 0) == (kinds[i] != "absorption")
    row = {
        "label": label,
        "species": str(table["species"][i]) if "species" in table.colnames else "",
        "rest": rest_all[i], "predicted": predicted[i], "fit": fit, "offset": offset,
        "group": group, "blend": list(blend),
        "candidate": bool(reason is None and fit.success and fit.detected and sign_ok
                          and abs(offset) <= tol and np.isfinite(fit.center_err.value)
                          and fit.center_err.value > 0),
    }
    if reason is not None:
        row["reason"] = reason
    return row


def measure_spectrum(spectrum, z=0.0, velocity=0 * _KMS, convention="optical", lines=None, *,
                     tolerance=100 * _KMS, min_strength=0.0, solve_for=None,
                     blend=BLEND_DISTANCE):
    """Fit the expected lines of a spectrum at a trial shift and solve the redshift.

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
        (and optionally ``species``, ``kind``).  Default: by spectral axis (`DEFAULT_SETS`):
        galaxy-emission for wavelengths (in the file's medium), radio for frequencies, xray for
        energies.
    tolerance : `~astropy.units.Quantity` ['speed']
        Largest offset of a fitted centre from its prediction for a detection.
    min_strength : float
        Skip lines of the set with a smaller ``strength``.
    solve_for : {"z", "velocity"}, optional
        Primary result; default ``"velocity"`` when ``z == 0`` else ``"z"``.
    blend : `~astropy.units.Quantity` ['speed']
        Lines of the set predicted closer than this to a neighbour are fitted together as one
        blend (`~zline.physics.fitting.fit_line` with ``components``: one shift, one velocity
        width, a flux per line), so each gets its own centre, flux and errors.  If that free fit
        gives a component of the wrong sign (neighbours trading flux), the blend is refitted with
        its flux ratios fixed to the set's ``strength`` (noted in ``reason``); failing that, the
        wrong-sign lines are left out one by one.  The locks of a
        blend share one fitted shift, so their centre errors are scaled by sqrt(number locked)
        to give the blend the weight of one measurement.  ``0 km/s`` fits every line alone.

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
    rest_all = u.Quantity(table["rest"]).to(s_unit, equivalencies=u.spectral())
    predicted = observed_position(rest_all, z=float(z), velocity=velocity, convention=convention)
    good = np.isfinite(axis.value)
    lo, hi = np.nanmin(axis.value[good]), np.nanmax(axis.value[good])
    margin = 10 * float(np.median(np.abs(np.diff(axis.value[good]))))

    keep = []
    for i in range(len(table)):
        p = float(predicted[i].value)
        if not lo + margin < p < hi - margin:
            continue
        if "strength" in table.colnames and float(table["strength"][i]) < min_strength:
            continue
        keep.append(i)
    kinds = {i: str(table["kind"][i]) if "kind" in table.colnames else "emission" for i in keep}

    rows = []
    for group in _blend_groups(keep, predicted, blend_kms):
        group, dropped, ratio_fixed = list(group), [], False
        while True:
            labels = [str(table["label"][i]) for i in group]
            try:
                fits = _fit_group(spectrum, group, labels, predicted, rest_all)
            except ValueError as exc:  # too few usable pixels, masked region ...
                fits = exc
                break
            wrong = [k for k, (i, fit) in enumerate(zip(group, fits))
                     if (fit.flux.value > 0) == (kinds[i] == "absorption")]
            if len(group) == 1 or not wrong:
                break
            strengths = _expected_strengths(table, group, kinds)
            if not dropped and strengths is not None:
                # unresolved neighbours trade flux: try the ratio the line set expects
                try:
                    tied = _fit_group(spectrum, group, labels, predicted, rest_all, strengths)
                except ValueError:
                    tied = None
                if tied is not None and all((fit.flux.value > 0) == (kinds[i] != "absorption")
                                            for i, fit in zip(group, tied)):
                    fits, ratio_fixed = tied, True
                    break
            # a component of the wrong sign is the blend fit trading flux between unresolved
            # neighbours: leave it out (it keeps this fit's upper limit) and refit the rest
            k = min(wrong, key=lambda k: abs(fits[k].snr))
            dropped.append((group.pop(k), labels[k], fits[k], labels))
        for i, label, fit, blend_labels in dropped:
            rows.append(_row(table, i, label, fit, predicted, rest_all, s_unit, kinds, tol,
                             group=i, blend=blend_labels,
                             reason=f"wrong sign in the blend fit with {', '.join(blend_labels)}; "
                                    f"refitted without it"))
        if isinstance(fits, ValueError):
            rows.extend({"label": lab, "error": str(fits)} for lab in labels)
            continue
        for i, label, fit in zip(group, labels, fits):
            rows.append(_row(table, i, label, fit, predicted, rest_all, s_unit, kinds, tol,
                             group=group[0], blend=labels if len(group) > 1 else []))
            if ratio_fixed:
                rows[-1]["note"] = (f"free fit of the blend {', '.join(labels)} gave a component "
                                    f"of the wrong sign: flux ratios fixed to the line set's "
                                    f"expected strengths")
    rows = [r for r in rows if "error" not in r]

    # a feature claimed by several lines goes to the one predicted closest
    # (components of one blend fit are already deblended from each other)
    taken = []
    for r in sorted((r for r in rows if r["candidate"]), key=lambda r: abs(r["offset"])):
        c = float(r["fit"].center.value)
        half = 0.5 * abs(float(r["fit"].fwhm.to_value(s_unit)))
        if any(abs(c - t) < half and g != r["group"] for t, g in taken):
            r["candidate"] = False
            r["reason"] = "feature claimed by a line predicted closer"
            continue
        taken.append((c, r["group"]))
    n_locked = {}
    for r in rows:
        if r["candidate"]:
            n_locked[r["group"]] = n_locked.get(r["group"], 0) + 1

    locks, out = [], []
    for r in sorted(rows, key=lambda r: float(r["rest"].to_value(u.AA, u.spectral()))):
        fit = r["fit"]
        detected = r["candidate"]
        reason = r.get("reason", "") or r.get("note", "")
        if detected:
            lock = Lock.from_fit(r["label"], r["rest"], fit, species=r["species"],
                                 medium=medium)
            if r.get("note"):
                lock.note = r["note"]
            n_in = n_locked[r["group"]]
            if n_in > 1:
                # the components share one fitted shift: n locks of one blend carry the weight
                # of one measurement, not n
                lock.observed_err = lock.observed_err * np.sqrt(n_in)
                lock.note = "; ".join(filter(None, [
                    r.get("note", ""), f"blend of {', '.join(r['blend'])} (one shift); centre "
                    f"error x sqrt({n_in})"]))
            locks.append(lock)
        elif not reason:
            if not fit.success:
                reason = "fit did not converge"
            elif not fit.detected:
                reason = "S/N below 3"
            elif abs(r["offset"]) > tol:
                reason = f"centre {r['offset']:.0f} km/s from the prediction"
            else:
                reason = "wrong sign for the line kind"
        limit = fit.upper_limit if fit.upper_limit is not None else 3.0 * fit.flux_err
        out.append({"label": r["label"], "species": r["species"], "rest": r["rest"],
                    "predicted": r["predicted"], "fit": fit, "detected": detected,
                    "limit": limit, "medium": medium, "reason": reason,
                    "blend": r["blend"]})

    if locks:
        if solve_for is None:
            solve_for = "velocity" if float(z) == 0.0 else "z"
        sol = solve_redshift(locks, convention=convention, solve_for=solve_for)
        zz, zerr, v, verr = sol.z, sol.z_err, sol.velocity, sol.velocity_err
    else:
        sol, zz, zerr = None, float("nan"), float("nan")
        v, verr = np.nan * _KMS, np.nan * _KMS
    return Measurement(z=zz, z_err=zerr, velocity=v, velocity_err=verr, convention=convention,
                       solution=sol, locks=locks, lines=out, line_set=set_name, medium=medium,
                       spectrum=spectrum, level_model=getattr(table, "meta", {}).get("model"))
