"""Blind redshift and velocity search: cross-correlate a spectrum with combs of line positions.

The data are prepared once (`zline.physics.scan_prep`): continuum removed by a running median over
7000 km/s (and over 40000 km/s for the broad-line combs), divided by the 1-sigma errors (an S/N
spectrum), down-weighted where its running scatter exceeds 1 (a Lyman-alpha forest, poor sky
subtraction), night-sky lines and telluric O2 bands masked, summed into cells of a uniform
ln(lambda) grid whose size is bounded before it is allocated.  Every kind of spectrum
(`zline.physics.scan_kinds.KINDS`: emission-line galaxy, absorption-line galaxy, quasar, star) has
its own comb of Gaussian teeth; each is correlated with the data by FFT (the data's transforms are
shared).  Every lag is a trial ``ln(1 + z)``; the returned candidates are refined on a lag grid
eight times finer by direct evaluation.

Score (one footing for all kinds): the correlation at each lag divided by its own noise (the comb
power over the teeth that fall in the data at that lag) is a matched-filter significance.  It is
multiplied by a plausibility factor ``sqrt(1 - exp(-P))``, P = sum over the teeth in the data of
min(|weight|, 1)**2.

No single line carries a reading: (1) the S/N of each pixel is clipped at 8 (or at the 95th
percentile of |S/N| when that is higher, as in rich absorption spectra), so one very strong line,
a cosmic ray or a sky residual counts no more than any clear line of its width; (2) tooth weights
are capped at 1.5 (Hbeta = 1), so Lyα or Hα alone never outweighs the rest of a comb; (3) the
plausibility factor is at most 0.80 for a reading with one line in the data and 0.93 with two;
(4) a reading with fewer than two separate features matched at `MATCH_THRESHOLD` has its score
multiplied by `SINGLE_LINE_FACTOR`.  A resolved doublet ([O II], [S II], Mg II, Na D ...) or a
line with its neighbours (Hα with [N II]) counts as several features, so such a reading is not
penalised; lines closer than three tooth widths (Ca II H and Hε) count once.

An absorption-line galaxy is an old stellar population, so its reading must show the 4000 A
break where it puts rest 4000 A inside the data: without one (a star's or a quasar's smooth
continuum read at the wrong z) its score is scaled down to at most `scan_kinds.BREAK_FLOOR`
(`scan_kinds.break_factor`; the factor multiplies the peak's score and never moves z).  Read
at z > 3 it must be dark below the Lyman limit where the data reach rest 870-905 A
(`scan_kinds.lyman_factor`, the same kind of factor): a star's metal lines read as the far-UV
interstellar lines of a z ~ 3.4 galaxy are not.

A quasar reading's z is re-centred on the lines that mark the systemic redshift
(`scan_kinds.systemic`); its score, and so the ranking, stays that of the comb.

Candidates within three tooth widths of a stronger one (of any kind) are the same reading and are
merged into it. The result carries a `confidence` that the first candidate is right: a logistic
function of the first score s1 and of its margin over the second reading s2 (at least 0.1), ``1 /
(1 + exp(-(a + b ln s1 + c ln(s1 / s2))))`` with the coefficients of `CONFIDENCE_COEFFS`. They were
fitted by maximum likelihood (iteratively reweighted least squares) to 586 readings: 540 synthetic
spectra of every kind (emission and absorption galaxies, quasars, stars, sky fibres and pure noise,
30 each at S/N 3, 10 and 30, from the tests' own generator tests/synthetic_spectra.py) and the 46
readable survey spectra of ../shared/realdata (SDSS and LAMOST pipeline redshifts). A reading is
right when |dz| < 0.003 (1 + z) (stars: 30 km/s); the first reading of a sky fibre or of noise is
wrong by definition. On those readings, 98% of the ones given a confidence >= 0.9 are right (77% of
those in 0.5-0.9, 24% in 0.1-0.5, 3% below 0.1). After the 4000 A break factor, the Na I D
sky treatment, the cool-star tooth width and the quasar comb's Lyα/N V teeth changed the scores,
the calibration was checked again on 591 readings (bench_scan.py's seeds: 540 synthetic, 51
survey spectra): 99% right at >= 0.9 (314 readings), 90% in 0.5-0.9, 29% in 0.1-0.5, 4% below
0.1, and every sky fibre and noise spectrum at S/N 3, 10 and 30 below 0.5.  A refit on those
readings, (-5.11, 1.65, 4.64), calibrates no better and lifts 2 of 30 sky fibres at S/N 10 above
0.5, so the coefficients were kept. tests/benchmarks/bench_scan.py repeats the fit on its seeds
and prints the coefficients and the calibration table. ``no_redshift`` is set when the
confidence is below `NO_REDSHIFT_CONFIDENCE`.
"""

from dataclasses import dataclass, field

import astropy.units as u
import numpy as np

from zline.physics import scan_kinds, scan_prep

__all__ = ["Candidate", "ScanResult", "scan_redshift", "scan_velocity", "MATCH_THRESHOLD",
           "SINGLE_LINE_FACTOR", "CONFIDENCE_COEFFS", "NO_REDSHIFT_CONFIDENCE", "KINDS",
           "STAR_VELOCITY_KMS", "confidence_from"]

#: Local S/N above which a predicted line counts as matched.
MATCH_THRESHOLD = 3.0
#: Score factor of a reading with fewer than two matched lines.
SINGLE_LINE_FACTOR = 0.75
#: (a, b, c) of the confidence logistic (see the module docstring).
CONFIDENCE_COEFFS = (-5.08, 1.62, 3.59)
#: Below this confidence the result says ``no_redshift``.
NO_REDSHIFT_CONFIDENCE = 0.5
#: Kinds of spectrum searched by default.
KINDS = scan_kinds.KINDS
#: Velocity window of the star kind when the caller gives none (km/s, both signs).
STAR_VELOCITY_KMS = 1000.0

_C_KMS = scan_prep.C_KMS


@dataclass(frozen=True)
class Candidate:
    """One redshift (or velocity) reading of a spectrum.

    Attributes
    ----------
    z : float
        Redshift (for a velocity reading: the total shift ``1 + z = shift_factor(velocity=v)``).
    z_err : float
        Approximate 1-sigma error from the curvature of the significance peak.
    score : float
        Significance of the correlation peak (matched-filter S/N, robustly rescaled) times the
        plausibility factors of the module docstring (1 for a template scan).
    n_matched : int
        Number of lines with a local S/N above `MATCH_THRESHOLD` at their predicted position.
    lines : list of str
        Labels of the matched lines, strongest local S/N first.
    velocity : `~astropy.units.Quantity` ['speed'] or None
        Velocity of the reading (velocity scans and star readings).
    velocity_err : `~astropy.units.Quantity` ['speed'] or None
    klass : str
        Kind of spectrum the reading reads: "emission-galaxy", "absorption-galaxy", "quasar",
        "star" (or "template" for a template scan with no kind given).
    line_set : str
        Name of the `zline.physics.catalog.LINE_SETS` set to draw for this reading.
    """

    z: float
    z_err: float
    score: float
    n_matched: int
    lines: list = field(default_factory=list)
    velocity: object = None
    velocity_err: object = None
    klass: str = "emission-galaxy"
    line_set: str = "galaxy-emission"

    def as_dict(self):
        """Plain-JSON form (velocities in km/s; NaN and infinities written as None)."""
        out = {"z": _num(self.z), "z_err": _num(self.z_err), "score": _num(self.score),
               "n_matched": self.n_matched, "lines": list(self.lines), "class": self.klass,
               "line_set": self.line_set}
        if self.velocity is not None:
            out["velocity_kms"] = _num(self.velocity.to_value(u.km / u.s))
            out["velocity_err_kms"] = _num(self.velocity_err.to_value(u.km / u.s))
        return out


def _num(x):
    x = float(x)
    return x if np.isfinite(x) else None


@dataclass(frozen=True)
class ScanResult:
    """Result of `scan_redshift` or `scan_velocity`.

    Attributes
    ----------
    candidates : list of `Candidate`
        Best first.
    z : `numpy.ndarray`
        Trial redshifts of the lag grid of the first candidate's kind.
    score : `numpy.ndarray`
        Score at each trial redshift.
    line_set : str
        Name of the line set of the first candidate ("template" for a template scan).
    medium : str
        Medium of the rest positions used ("vacuum" or "air").
    width : float
        Typical comb tooth sigma in ln(lambda) of the first candidate's kind.
    confidence : float
        Probability in [0, 1] that the first candidate is right (see the module docstring).
    no_redshift : bool
        True when no reading is convincing (confidence below `NO_REDSHIFT_CONFIDENCE`).
    masked : list of dict
        Regions left out of the search: ``lo``, ``hi`` (the spectrum's spectral unit, as floats),
        ``unit`` and ``reason``.
    notes : list of str
        What the search changed to stay within its bounds (pixels combined, grid coarsened).
    kinds : tuple of str
        Kinds searched.
    """

    candidates: list
    z: np.ndarray
    score: np.ndarray
    line_set: str
    medium: str
    width: float
    confidence: float = 0.0
    no_redshift: bool = True
    masked: list = field(default_factory=list)
    notes: list = field(default_factory=list)
    kinds: tuple = ()


# --------------------------------------------------------------------------------------------
# peaks


def _peaks(prep, comb, res, s_min, s_max, n_keep, plausible=True):
    """Best peaks of one kind: list of dicts (s, score, err, lines)."""
    from scipy import signal  # noqa: PLC0415

    lag, score = res["lag"], res["score"]
    if plausible and res["covered"] is not None:
        score = score * np.sqrt(-np.expm1(-res["covered"]))
    if len(score) == 0:
        return []
    distance = max(2, int(round(2.0 * comb.sigma / prep["h"]))) if len(comb) else 2
    idx, _ = signal.find_peaks(score, distance=distance)
    if len(idx) == 0:
        idx = np.array([int(np.argmax(score))])
    idx = idx[np.argsort(score[idx])[::-1]][:n_keep]
    out = []
    for i in idx:
        s, peak, s_err = scan_kinds.refine(lag, score, i)
        if not s_min - prep["h"] <= s <= s_max + prep["h"]:
            continue
        s = float(np.clip(s, s_min, s_max))
        lines = scan_kinds.matched(prep, comb, s, MATCH_THRESHOLD) if comb.labels else []
        if len(comb) > 1 and plausible and scan_kinds.features(comb, lines) < 2:
            peak *= SINGLE_LINE_FACTOR
        out.append(dict(s=s, score=float(peak), err=float(s_err), lines=lines))
    out.sort(key=lambda c: -c["score"])
    return out[:n_keep], dict(lag=res["lag"], score=score)


def confidence_from(s1, s2):
    """Confidence that the first reading is right from its score s1 and the second's s2."""
    a, b, c = CONFIDENCE_COEFFS
    s1 = max(float(s1), 1e-3)
    s2 = min(max(float(s2), 0.1), s1)
    x = a + b * np.log(s1) + c * np.log(s1 / s2)
    return float(1.0 / (1.0 + np.exp(-np.clip(x, -50, 50))))


# --------------------------------------------------------------------------------------------
# the search


def _check_top(top):
    if isinstance(top, bool) or not isinstance(top, (int, np.integer)) or top < 1:
        raise ValueError(f"Argument 'top' must be a positive integer; got {top!r}.")
    return int(top)


def _check_spectrum(spectrum):
    if not hasattr(spectrum, "spectral_axis") or not hasattr(spectrum, "flux"):
        raise TypeError(f"Argument 'spectrum' must be a specutils Spectrum (see "
                        f"zline.physics.spectra.read_spectrum); got {type(spectrum).__name__}.")


def _window(window):
    if window is None:
        return None
    if isinstance(window, bool) or not isinstance(window, (int, np.integer)) or window < 5:
        raise ValueError(f"Argument 'window' must be an integer number of pixels >= 5; "
                         f"got {window!r}.")
    return int(window) | 1


def _template_samples(template, prep, window):
    """The template's S/N on the data's grid step, in the data's medium: (tmpl, t0)."""
    t = scan_prep.prepare(template, window=window, mask_sky=False, robust=False)
    lnlam, snr, good = t["lnlam"], t["snr"], t["good"]
    if t["medium"] != prep["medium"]:
        from zline.physics import media  # noqa: PLC0415

        lam = np.exp(lnlam)
        sel = lam > 2000.0  # vacuum kept below 2000 A (common practice, as the line sets)
        conv = media.air_to_vacuum if t["medium"] == "air" else media.vacuum_to_air
        lam[sel] = conv(lam[sel] * u.AA).to_value(u.AA)
        lnlam = np.log(lam)
    h = prep["h"]
    t0 = lnlam[good][0]
    m = int(np.floor((lnlam[good][-1] - t0) / h)) + 1
    if m > scan_prep.MAX_GRID:
        raise ValueError(f"Argument 'template' would need {m} grid points at the data's step "
                         f"(at most {scan_prep.MAX_GRID}); trim or rebin the template.")
    tmpl = np.interp(t0 + h * np.arange(m), lnlam, np.where(good, snr, 0.0))
    tmpl /= np.max(np.abs(tmpl)) or 1.0
    return tmpl, t0


def _search(spectrum, plan, top, template=None, step=None, window=None, mask_sky=True,
            convention=None):
    """plan: list of (kind, line_set, s_min, s_max, velocity_reading)."""
    from zline.physics.kinematics import velocity_from  # noqa: PLC0415

    wide = scan_kinds.WIDE_CONTINUUM_KMS if any(p[0] in ("quasar", "star") for p in plan) else None
    prep = scan_prep.prepare(spectrum, window=window, step=step, mask_sky=mask_sky,
                             wide_kms=wide, robust=template is None)
    dln, h = prep["dln"], prep["h"]
    sig_em = max(prep["width_em"], 0.8 * h)
    sig_abs = prep["width_abs"]
    sig_abs = float(np.clip(sig_abs, max(sig_em, 0.8 * h, 1.5 * dln),
                            max(scan_kinds.ABS_SIGMA_MAX_KMS / _C_KMS, 0.8 * h)))
    g0, g1 = prep["grid"][0], prep["grid"][-1]
    jobs, problems = [], []
    for kind, set_name, s_min, s_max, vel in plan:
        if template is not None:
            tmpl, t0 = _template_samples(template, prep, window)
            comb = scan_kinds.Comb("template", np.array([t0]), np.array([1.0]),
                                   np.array([sig_em]), [])
            jobs.append((kind, comb, s_min, s_max, vel, tmpl, t0))
            continue
        sigma = sig_abs if kind in ("absorption-galaxy", "star") else sig_em
        for variant in (kind, "star-hot") if kind == "star" else (kind,):
            if variant == "star":  # cool stars: narrow metal lines (`COOL_STAR_SIGMA_KMS`)
                sigma = min(sig_abs, max(scan_kinds.COOL_STAR_SIGMA_KMS / _C_KMS, 0.8 * h,
                                         1.5 * dln))
            elif variant == "star-hot":
                sigma = sig_abs
            comb = scan_kinds.comb_for(set_name, prep["medium"], sigma, variant)
            pad = 5 * float(np.max(comb.sigmas))
            comb = comb.restrict(g0 - s_max - pad, g1 - s_min + pad)
            if len(comb) == 0:
                problems.append(f"no line of the set {set_name!r} falls in the data for "
                                f"{np.expm1(s_min):.4g} <= z <= {np.expm1(s_max):.4g}")
                continue
            jobs.append((kind, comb, s_min, s_max, vel, None, None))
    if not jobs:
        raise ValueError("; ".join(problems).capitalize() + "; choose another set (argument "
                         "'lines') or range.")
    corr = scan_kinds.Correlator(prep, max(len(j[5]) if j[5] is not None else
                                           scan_kinds.template_length(j[1], h) for j in jobs))
    found, curves = [], {}
    for kind, comb, s_min, s_max, vel, tmpl, t0 in jobs:
        res = corr.correlate(comb, s_min, s_max, tmpl=tmpl, t0=t0)
        if len(res["lag"]) < 3:
            problems.append(f"the data do not overlap the lines of {comb.name!r} for "
                            f"{np.expm1(s_min):.4g} <= z <= {np.expm1(s_max):.4g}")
            continue
        peaks, curve = _peaks(prep, comb, res, s_min, s_max, top + 2, plausible=tmpl is None)
        curves[kind] = (curve, comb)
        for p in peaks:
            if kind == "absorption-galaxy" and tmpl is None:
                p["score"] *= (scan_kinds.break_factor(prep, p["s"])
                               * scan_kinds.lyman_factor(prep, p["s"]))
            found.append(dict(p, kind=kind, comb=comb, vel=vel, plausible=tmpl is None,
                              s_min=s_min, s_max=s_max))
    if not found:
        raise ValueError("; ".join(problems).capitalize() + "; widen the range or choose "
                         "another line set.")
    found.sort(key=lambda c: -c["score"])
    kept = []
    for c in found:
        if any(abs(c["s"] - k["s"]) < 3 * max(c["comb"].sigma, k["comb"].sigma, h)
               for k in kept):
            continue
        kept.append(c)
    one = 1.0 * u.AA
    cands = []
    for c in kept[:top]:
        if len(c["comb"]) and c["plausible"]:
            s_fine = scan_kinds.fine(prep, c["comb"], c["s"])[0]
            if c["kind"] == "quasar":
                s_fine = scan_kinds.systemic(prep, c["comb"], s_fine)
            c["s"] = float(np.clip(s_fine, c["s_min"], c["s_max"]))
        s, e = c["s"], c["err"]
        kw = {}
        if c["vel"]:
            conv = convention or ("radio" if prep["is_freq"] else "optical")
            v = velocity_from(np.exp(s) * one, one, convention=conv).to(u.km / u.s)
            ee = e if np.isfinite(e) else 0.0
            v_hi = velocity_from(np.exp(s + ee) * one, one, convention=conv)
            v_lo = velocity_from(np.exp(s - ee) * one, one, convention=conv)
            kw = dict(velocity=v, velocity_err=(0.5 * (v_hi - v_lo)).to(u.km / u.s))
        klass = c["kind"]
        cands.append(Candidate(z=float(np.expm1(s)), z_err=float(np.exp(s) * e),
                               score=c["score"], n_matched=len(c["lines"]), lines=c["lines"],
                               klass=klass, line_set=c["comb"].name, **kw))
    s1 = kept[0]["score"]
    s2 = kept[1]["score"] if len(kept) > 1 else 0.0
    conf = confidence_from(s1, s2)
    curve, comb = curves[kept[0]["kind"]]
    masked = [dict(lo=lo, hi=hi, unit=str(prep["unit"]), reason=why)
              for lo, hi, why in prep["masked"]]
    return ScanResult(candidates=cands, z=np.expm1(curve["lag"]), score=curve["score"],
                      line_set=cands[0].line_set, medium=prep["medium"], width=comb.sigma,
                      confidence=conf, no_redshift=bool(conf < NO_REDSHIFT_CONFIDENCE),
                      masked=masked, notes=list(prep["notes"]),
                      kinds=tuple(dict.fromkeys(j[0] for j in jobs)))


def _kind_of_set(name):
    for kind, set_name in scan_kinds.KIND_SETS.items():
        if set_name == name:
            return kind
    return "emission-galaxy"


def _check_kinds(klass):
    if klass is None:
        return KINDS
    kinds = (klass,) if isinstance(klass, str) else tuple(klass)
    bad = [k for k in kinds if k not in KINDS]
    if bad or not kinds:
        raise ValueError(f"Argument 'klass' must be one of {', '.join(map(repr, KINDS))} (or a "
                         f"list of them); got {klass!r}.")
    return kinds


def _velocity_range(v_min, v_max, convention):
    from zline.physics.kinematics import shift_factor  # noqa: PLC0415

    for name, val in (("v_min", v_min), ("v_max", v_max)):
        if not isinstance(val, u.Quantity) or not val.unit.is_equivalent(u.km / u.s):
            raise u.UnitTypeError(f"Argument '{name}' must be a Quantity in speed units "
                                  f"(e.g. -500 * u.km / u.s); got {val!r}.")
    if not v_max > v_min:
        raise ValueError(f"Arguments 'v_min' < 'v_max' required; got {v_min}, {v_max}.")
    return (float(np.log(shift_factor(velocity=v_min, convention=convention))),
            float(np.log(shift_factor(velocity=v_max, convention=convention))))


def _convention(spectrum, convention):
    from zline.physics.kinematics import CONVENTIONS  # noqa: PLC0415

    if convention is None:
        unit = u.Quantity(spectrum.spectral_axis).unit
        return "radio" if unit.is_equivalent(u.Hz) else "optical"
    if convention not in CONVENTIONS:
        raise ValueError(f"Argument 'convention' must be one of {CONVENTIONS!r}; "
                         f"got {convention!r}.")
    return convention


def scan_redshift(spectrum, lines=None, z_min=0.0, z_max=7.0, top=5, template=None, dz=None,
                  window=None, klass=None, v_min=None, v_max=None, mask_sky=True,
                  convention=None):
    """Search a spectrum for its redshift by correlation with combs of line positions.

    Parameters
    ----------
    spectrum : `specutils.Spectrum`
        1-D spectrum with a wavelength, frequency, energy or wavenumber axis (as returned by
        `zline.physics.spectra.read_spectrum`).  Its uncertainty is used for the S/N; without
        one, a running robust scatter of the continuum-subtracted flux stands in.  If
        ``meta["zline"]["medium"] == "air"`` the rest positions are taken in air.
    lines : str, optional
        A set of `zline.physics.catalog.LINE_SETS` to search with alone.  Default: every kind
        of `KINDS` on a wavelength axis, ranked on one footing (stars in a velocity window of
        +-`STAR_VELOCITY_KMS` when ``z_min <= 0``, absorption-line galaxies above it); the
        radio set as a velocity scan on a frequency axis (``v_min``/``v_max``, default
        +-`STAR_VELOCITY_KMS`); the X-ray set on an energy axis.
    z_min, z_max : float
        Redshift range searched (z > -1).
    top : int
        Number of candidates returned.
    template : `specutils.Spectrum`, optional
        A rest-frame template spectrum used instead of the combs (continuum-subtracted the same
        way; its medium, ``meta["zline"]["medium"]``, is converted to the data's); candidates
        then list no lines and read the kind ``klass`` (default "template").  A template
        weighs its own lines, so neither it nor the data are clipped or whitened as for the
        combs (clipped, a template's strong and weak lines weigh alike and the peak moves by
        up to a pixel).
    dz : float, optional
        Largest lag step in z; default: the finest pixel step of the data.
    window : int, optional
        Running-median continuum window in pixels (default: 7000 km/s of pixels).
    klass : str or list of str, optional
        Restrict the default search to these kinds (`KINDS`).
    v_min, v_max : `~astropy.units.Quantity` ['speed'], optional
        Search this velocity window (in ``convention``) instead of the redshift range; the
        candidates then carry velocities.
    mask_sky : bool
        Leave the bright night-sky lines and the telluric O2 bands out of the search (default).
    convention : str, optional
        Velocity convention of `zline.physics.kinematics.CONVENTIONS`; default "radio" for a
        frequency axis, else "optical".

    Returns
    -------
    `ScanResult`

    Raises
    ------
    ValueError
        Unknown line set or kind, bad range, too few usable pixels, or no line in the data.
    TypeError
        ``spectrum`` is not a Spectrum.

    Examples
    --------
    >>> import numpy as np, astropy.units as u
    >>> from specutils import Spectrum
    >>> lam = np.linspace(5000.0, 8000.0, 3000)
    >>> flux = np.zeros(lam.size)
    >>> for rest, f in ((4862.69, 1.0), (5008.24, 3.0), (4960.30, 1.0), (6564.61, 3.0)):
    ...     flux += f * np.exp(-0.5 * ((lam - rest * 1.1) / 2.0) ** 2)
    >>> noise = np.random.default_rng(1).normal(0.0, 0.05, lam.size)
    >>> res = scan_redshift(Spectrum(flux=(flux + noise) * u.Jy, spectral_axis=lam * u.AA))
    >>> round(res.candidates[0].z, 3), res.candidates[0].klass, res.no_redshift
    (0.1, 'emission-galaxy', False)
    """
    _check_spectrum(spectrum)
    top = _check_top(top)
    for name, val in (("z_min", z_min), ("z_max", z_max)):
        if isinstance(val, u.Quantity) or not np.isscalar(val) or not np.isfinite(val) \
                or val <= -1:
            raise ValueError(f"Argument '{name}' must be a finite number > -1; got {val!r}.")
    if not z_max > z_min:
        raise ValueError(f"Arguments 'z_min' < 'z_max' required; got {z_min!r}, {z_max!r}.")
    step = None
    if dz is not None:
        if not np.isscalar(dz) or not dz > 0:
            raise ValueError(f"Argument 'dz' must be a positive number; got {dz!r}.")
        step = float(dz) / (1.0 + float(z_max))
    kinds = _check_kinds(klass)
    convention = _convention(spectrum, convention)
    if (v_min is None) != (v_max is None):
        raise ValueError("Arguments 'v_min' and 'v_max' go together; give both or neither.")
    s_min, s_max = float(np.log1p(z_min)), float(np.log1p(z_max))
    vel = v_min is not None
    if vel:
        s_min, s_max = _velocity_range(v_min, v_max, convention)
    if lines is None and template is None:
        from zline.physics.catalog import line_set_for_axis  # noqa: PLC0415

        name, _ = line_set_for_axis(u.Quantity(spectrum.spectral_axis).unit)
        if name == "radio":
            lines = name
            if not vel:
                vmax = STAR_VELOCITY_KMS * u.km / u.s
                s_min, s_max = _velocity_range(-vmax, vmax, convention)
                vel = True
        elif name == "xray":
            lines = name
    if template is not None:
        plan = [(klass if isinstance(klass, str) else "template", "template", s_min, s_max, vel)]
    elif lines is not None:
        plan = [(_kind_of_set(lines), lines, s_min, s_max, vel)]
    else:
        plan = []
        vmax = STAR_VELOCITY_KMS * u.km / u.s
        star_lo, star_hi = _velocity_range(-vmax, vmax, convention)
        stars = "star" in kinds and not vel and s_min <= star_hi
        for kind in kinds:
            if kind == "star" and not vel:
                if stars:
                    plan.append((kind, scan_kinds.KIND_SETS[kind], star_lo, star_hi, True))
            elif kind == "absorption-galaxy" and stars and s_max > star_hi:
                # an absorption spectrum inside the star window reads as a star
                plan.append((kind, scan_kinds.KIND_SETS[kind], max(s_min, star_hi), s_max,
                             vel))
            else:
                plan.append((kind, scan_kinds.KIND_SETS[kind], s_min, s_max, vel))
        if not plan:
            raise ValueError(f"No kind of {kinds!r} can be searched for {z_min!r} <= z <= "
                             f"{z_max!r} (stars are searched only near z = 0).")
    return _search(spectrum, plan, top, template=template, step=step, window=_window(window),
                   mask_sky=mask_sky, convention=convention)


def scan_velocity(spectrum, lines="nebular", v_min=-500 * u.km / u.s, v_max=500 * u.km / u.s,
                  top=5, convention=None, template=None, window=None, klass=None,
                  mask_sky=True):
    """Search a spectrum near z = 0 for its line-of-sight velocity.

    Parameters
    ----------
    spectrum : `specutils.Spectrum`
        As for `scan_redshift`.
    lines : str or None
        A set of `zline.physics.catalog.LINE_SETS` (e.g. "nebular", "radio", "stellar"); None
        searches every kind of `KINDS` (or those of ``klass``) in the window.
    v_min, v_max : `~astropy.units.Quantity` ['speed']
        Velocity range searched.
    top : int
        Number of candidates returned.
    convention : str, optional
        One of `zline.physics.kinematics.CONVENTIONS`; default "radio" for a frequency axis,
        else "optical".
    template, window, klass, mask_sky
        As for `scan_redshift`.

    Returns
    -------
    `ScanResult`
        Each candidate carries ``velocity`` and ``velocity_err`` (km/s) in ``convention``; its
        ``z`` is the equivalent total shift.
    """
    _check_spectrum(spectrum)
    _velocity_range(v_min, v_max, "optical")
    z_lo = -0.99  # the velocity window replaces the redshift range
    return scan_redshift(spectrum, lines=lines if lines is not None or template is not None
                         else None, z_min=z_lo, z_max=1.0, top=top, template=template,
                         window=window, klass=klass, v_min=v_min, v_max=v_max,
                         mask_sky=mask_sky, convention=convention)
