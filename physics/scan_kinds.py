"""Kinds of spectrum the redshift search reads, their line combs, and the shared FFT correlation.

Each kind (`KINDS`) is a line set of `zline.physics.catalog.LINE_SETS` with a rule for the width
of its teeth:

* ``emission-galaxy`` -- "galaxy-emission", teeth as wide as the measured emission lines;
* ``absorption-galaxy`` -- "galaxy-absorption", teeth as wide as the measured absorption lines
  (at least the instrumental width, at most 350 km/s sigma);
* ``quasar`` -- "quasar", broad lines with teeth of FWHM `BROAD_FWHM_KMS` (5000 km/s, the middle
  of the 2000-10000 km/s of type 1 AGN, wide enough to hold a C IV blueshift of 1500 km/s inside
  the tooth; Lyα where it peaks in quasars, `QUASAR_PEAKS_AA`; N V, a blend on Lyα's red wing,
  at half weight), forbidden lines as narrow teeth;
* ``star`` -- "stellar", absorption teeth, searched only in a velocity window around z = 0,
  twice: with teeth as wide as the measured absorption lines but at most `COOL_STAR_SIGMA_KMS`
  (the narrow metal lines of cool stars) and with Balmer teeth of sigma `HOT_BALMER_SIGMA_KMS`
  on the wide-continuum S/N (the broad Balmer lines of hot stars).

Weights: each tooth carries the line's typical strength, capped at `WEIGHT_CAP` (so no single line,
e.g. Lyα, dominates a comb and a reading resting on one line is a weak reading), with the sign of
the line (absorption negative).  The data's three FFTs (S/N, variance and coverage) are computed
once and reused by every kind.

A quasar reading is then re-centred (`systemic`): the comb's peak rests on Lyα, whose blue half
the forest absorbs, and on the blueshifted high-ionisation lines, so within a few thousand km/s
of it the reading moves onto the lines that mark the systemic redshift (Mg II, the Balmer
lines, the narrow forbidden lines) when they are in clean data with S/N, else half way onto
C III] and the high-ionisation lines read with their typical blueshift.
"""

import functools
import warnings

import astropy.units as u
import numpy as np
from scipy import fft as sfft
from scipy import signal
from scipy.signal._peak_finding_utils import PeakPropertyWarning as _PeakPropertyWarning

__all__ = ["KINDS", "KIND_SETS", "WEIGHT_CAP", "BROAD_FWHM_KMS", "Comb", "comb_for", "Correlator",
           "line_width", "template_length", "refine", "matched", "fine", "features",
           "break_strength", "break_factor", "lyman_factor", "BREAK_OLD", "BREAK_FLOOR",
           "COOL_STAR_SIGMA_KMS",
           "QUASAR_PEAKS_AA", "QUASAR_NV_FACTOR", "QUASAR_SYSTEMIC", "QUASAR_BLUESHIFTED",
           "QUASAR_BLUESHIFT_KMS", "systemic"]

C_KMS = 299792.458  # km/s, exact (SI definition)
KIND_SETS = {"emission-galaxy": "galaxy-emission", "absorption-galaxy": "galaxy-absorption",
             "quasar": "quasar", "star": "stellar"}
KINDS = tuple(KIND_SETS)
WEIGHT_CAP = 1.5
HOT_BALMER_SIGMA_KMS = 700.0  # pressure-broadened Balmer lines of A-F stars (common practice)
BROAD_FWHM_KMS = 5000.0
WIDE_CONTINUUM_KMS = 40000.0  # running-median window under broad lines (several FWHM)
ABS_SIGMA_MAX_KMS = 350.0
#: Largest tooth sigma of the cool-star comb: the metal lines of F-M stars are intrinsically a
#: few km/s wide (slow rotation, common practice), so their observed width is the instrument's;
#: the widest absorption features such spectra show are blends, whose width would blur the
#: velocity (the hot-star comb keeps the measured width)
COOL_STAR_SIGMA_KMS = 100.0
#: Quasar broad lines whose comb tooth sits where the line peaks in quasars rather than at its
#: laboratory wavelength, label: (laboratory, peak) in vacuum Angstrom.  Lyα: the forest absorbs
#: its blue half, so its peak lies redward of 1215.67 A; peak of the median composite of SDSS
#: quasars, Vanden Berk et al. 2001, AJ 122, 549, Table 2 (from memory, not looked up).  The
#: blueshifted high-ionisation lines (C IV, Si IV) stay at their laboratory wavelengths inside
#: teeth wide enough to hold the shift: placed at the composite's peaks they read the survey
#: spectra of ../shared/realdata 180 km/s above the SDSS pipeline redshift on average.
QUASAR_PEAKS_AA = {"Lyα": (1215.67, 1216.25)}
#: Weight factor of the N V 1240 tooth in the quasar comb (a blend on Lyα's red wing).  Chosen
#: between 0 (left out) and 1 on the SDSS quasars of ../shared/realdata and the tests' synthetic
#: quasars: 0 reads synthetic quasars ~900 km/s high (Lyα alone, its blue half under the forest),
#: 1 reads one real quasar 970 km/s low (N V pulled onto Lyα's peak); 0.5 neither.
QUASAR_NV_FACTOR = 0.5
#: 4000 A break (narrow definition: mean f_nu over rest 4000-4100 A over 3850-3950 A) of the old
#: populations of absorption-line galaxies is about 1.5-2 and that of star-forming galaxies
#: 1.1-1.4 (common practice, from memory); a smooth stellar or quasar continuum gives ~1
BREAK_OLD = 1.3
#: Score factor of an absorption-galaxy reading whose break is measured at 1 or below
BREAK_FLOOR = 0.6
_BREAK_BLUE, _BREAK_RED = (3850.0, 3950.0), (4000.0, 4100.0)  # rest, Angstrom (vacuum ~ air)


class Comb:
    """Teeth (ln rest position, signed weight, sigma in ln lambda, label) of one line set."""

    def __init__(self, name, rest_ln, weights, sigmas, labels, data="d"):
        self.name, self.rest_ln, self.weights = name, rest_ln, weights
        self.sigmas, self.labels, self.data = sigmas, labels, data
        w2 = weights**2
        self.sigma = float(np.sum(w2 * sigmas) / np.sum(w2)) if w2.sum() > 0 else 0.0

    def restrict(self, lo, hi):
        keep = (self.rest_ln > lo) & (self.rest_ln < hi) & (self.weights != 0)
        return Comb(self.name, self.rest_ln[keep], self.weights[keep], self.sigmas[keep],
                    [lab for lab, k in zip(self.labels, keep) if k], self.data)

    def __len__(self):
        return len(self.rest_ln)


def line_width(snr, good, dln, sign=1.0):
    """Median Gaussian sigma (ln lambda) of the strongest separated features of sign ``sign``."""
    d = np.where(good, sign * snr, 0.0)
    sm = np.convolve(d, np.ones(3) / 3, mode="same")
    peaks, props = signal.find_peaks(sm, height=6.0, distance=10)
    if len(peaks) == 0:
        return 1.5 * dln
    best = peaks[np.argsort(props["peak_heights"])[::-1][:7]]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", _PeakPropertyWarning)
        widths = signal.peak_widths(sm, best, rel_height=0.5)[0] / 2.3548
    widths = widths[np.isfinite(widths) & (widths > 0)]
    if len(widths) == 0:
        return 1.5 * dln
    return float(np.clip(np.median(widths), 0.7, 30.0)) * dln


@functools.lru_cache(maxsize=32)
def _set_arrays(line_set_name, medium):
    from zline.physics.catalog import LINE_SETS, line_set  # noqa: PLC0415

    if line_set_name not in LINE_SETS:
        raise ValueError(f"Argument 'lines' must be one of {', '.join(map(repr, LINE_SETS))}; "
                         f"got {line_set_name!r}.")
    table = line_set(line_set_name, medium=medium, unit=u.AA)
    rest = table["rest"].to_value(u.AA)
    sign = np.where(np.asarray(table["kind"]) == "absorption", -1.0, 1.0)
    strength = np.asarray(table["strength"], dtype=float)
    labels = tuple(str(x) for x in table["label"])
    return np.log(rest), sign * np.minimum(strength, WEIGHT_CAP), labels


def _is_hydrogen(label):
    return label[:1] == "H" and (label[1:2] in "αβγδεζηθ" or label[1:].isdigit())


def comb_for(line_set_name, medium, sigma, kind=None):
    """The comb of a line set; ``kind`` (one of `KINDS` or None) picks the tooth-width rule and
    the S/N the comb is matched to (quasars: the wide-continuum one)."""
    rest_ln, weights, labels = _set_arrays(line_set_name, medium)
    sigmas = np.full(rest_ln.size, float(sigma))
    data = "d"
    rest_ln = rest_ln.copy()
    if kind == "quasar":
        broad = np.array([not lab.startswith("[") for lab in labels])
        sigmas[broad] = max(sigma, BROAD_FWHM_KMS / 2.3548 / C_KMS)
        data = "d_wide"
        for k, lab in enumerate(labels):
            if lab in QUASAR_PEAKS_AA:
                lab_aa, peak_aa = QUASAR_PEAKS_AA[lab]
                rest_ln[k] += np.log(peak_aa / lab_aa)
    elif kind == "star-hot":
        hyd = np.array([_is_hydrogen(lab) for lab in labels])
        sigmas[hyd] = max(sigma, HOT_BALMER_SIGMA_KMS / C_KMS)
        data = "d_wide"
    weights = weights.copy()
    # blends whose mix varies from object to object would pull the reading: Ca II H and Hε are
    # 120 km/s apart; the absorption combs keep Ca II H (cool populations), the hot-star comb Hε.
    # Broad N V 1240 sits on the red wing of broad Lyα (5800 km/s apart, about one broad-line
    # FWHM), so its tooth partly reads the wing of Lyα: the quasar comb gives it half its weight
    # (`QUASAR_NV_FACTOR`)
    drop = {"absorption-galaxy": ("Hε",), "star": ("Hε",), "star-hot": ("Ca II H",)}.get(kind, ())
    for k, lab in enumerate(labels):
        if lab in drop:
            weights[k] = 0.0
        elif kind == "quasar" and lab == "N V 1240":
            weights[k] *= QUASAR_NV_FACTOR
    return Comb(line_set_name, rest_ln, weights, sigmas, list(labels), data)


def _teeth(n, h, comb, t0, square=False):
    """Sum of Gaussian teeth on the grid x_m = t0 + m*h; ``square``: teeth w**2 g**2 normalised
    to unit sum per tooth times min(|w|, 1)**2 (the coverage template)."""
    out = np.zeros(n)
    for c, w, s in zip(comb.rest_ln - t0, comb.weights, comb.sigmas):
        half = int(np.ceil(5 * s / h)) + 1
        m0 = int(round(c / h))
        m = np.arange(max(0, m0 - half), min(n, m0 + half + 1))
        g = np.exp(-0.5 * ((m * h - c) / s) ** 2)
        if square:
            g2 = g**2
            out[m] += min(abs(w), 1.0) ** 2 * g2 / (np.sqrt(np.pi) * s / h)
        else:
            out[m] += w * g
    return out


def template_length(comb, h):
    """Number of grid points of the comb's template at step h."""
    pad = 6 * float(np.max(comb.sigmas))
    return int(np.ceil((comb.rest_ln.max() - comb.rest_ln.min() + 2 * pad) / h)) + 1


class Correlator:
    """Correlation of the prepared data with any number of combs, sharing the data's FFTs."""

    def __init__(self, prep, max_template):
        self.prep = prep
        self.n = len(prep["grid"])
        self.nfft = sfft.next_fast_len(self.n + max_template, real=True)
        self._hat = {key: sfft.rfft(prep[key], self.nfft)
                     for key in ("d", "d_wide", "var", "cov") if prep.get(key) is not None}

    def _xcorr(self, key, tmpl_hat, m):
        r = sfft.irfft(self._hat[key] * np.conj(tmpl_hat), self.nfft)
        return np.concatenate([r[self.nfft - (m - 1):], r[: self.n]]) if m > 1 else r[: self.n]

    def correlate(self, comb, s_min, s_max, tmpl=None, t0=None):
        """Significance at each lag ln(1+z) for a comb (or a sampled template ``tmpl`` whose
        first point is at ln lambda ``t0``).

        Returns dict ``lag, score, covered`` (covered: sum of min(|w|,1)**2 of the teeth in the
        data at each lag; None for a template), restricted to s_min..s_max (2 steps margin).
        """
        h, g0 = self.prep["h"], self.prep["grid"][0]
        if tmpl is None:
            pad = 6 * float(np.max(comb.sigmas))
            t0 = comb.rest_ln.min() - pad
            m = template_length(comb, h)
            tmpl = _teeth(m, h, comb, t0)
            sq = _teeth(m, h, comb, t0, square=True)
        else:
            m, sq = len(tmpl), None
        that = sfft.rfft(tmpl, self.nfft)
        corr = self._xcorr(comb.data if comb is not None else "d", that, m)
        power = self._xcorr("var", sfft.rfft(tmpl**2, self.nfft), m)
        covered = self._xcorr("cov", sfft.rfft(sq, self.nfft), m) if sq is not None else None
        lag = g0 + np.arange(-(m - 1), self.n) * h - t0
        valid = power > 1e-6 * np.max(tmpl**2)
        with np.errstate(invalid="ignore", divide="ignore"):
            score = np.where(valid, corr / np.sqrt(np.where(valid, power, 1.0)), 0.0)
        sel = (lag >= s_min - 2 * h) & (lag <= s_max + 2 * h) & valid
        return dict(lag=lag[sel], score=score[sel],
                    covered=None if covered is None else np.maximum(covered[sel], 0.0))


def refine(lag, score, i):
    if 0 < i < len(score) - 1:
        y0, y1, y2 = score[i - 1], score[i], score[i + 1]
        den = y0 - 2 * y1 + y2
        h = lag[i + 1] - lag[i]
        if den < 0:
            off = 0.5 * (y0 - y2) / den
            off = float(np.clip(off, -1.0, 1.0))
            peak = y1 - 0.25 * (y0 - y2) * off
            curv = den / h**2
            err = 1.0 / np.sqrt(max(-peak * curv, 1e-300)) if peak > 0 else np.nan
            return lag[i] + off * h, peak, err
    return lag[i], score[i], np.nan


def matched(prep, comb, s, threshold=3.0):
    """Labels of the comb's lines at ln(1+z) = s with a local S/N above threshold."""
    grid, cov, h, var = prep["grid"], prep["cov"], prep["h"], prep["var"]
    d = prep[comb.data]
    c = comb.rest_ln + s
    inside = (c >= grid[0]) & (c <= grid[-1])
    if not inside.any():
        return []
    c, w, sig = c[inside], comb.weights[inside], comb.sigmas[inside]
    labels = [lab for lab, k in zip(comb.labels, inside) if k]
    i0 = np.clip(np.round((c - grid[0]) / h).astype(int), 0, len(grid) - 1)
    half = int(np.ceil(3 * sig.max() / h)) + 1
    idx = i0[:, None] + np.arange(-half, half + 1)[None, :]
    ok = (idx >= 0) & (idx < len(grid))
    idx = np.clip(idx, 0, len(grid) - 1)
    g = np.exp(-0.5 * ((grid[idx] - c[:, None]) / sig[:, None]) ** 2) * cov[idx] * ok
    g *= np.abs(grid[idx] - c[:, None]) <= 3 * sig[:, None] + h
    norm = np.sqrt(np.sum(var[idx] * g**2, axis=1))
    with np.errstate(invalid="ignore", divide="ignore"):
        local = np.sign(w) * np.sum(d[idx] * g, axis=1) / norm
    hit = (norm > 0) & (cov[i0] > 0) & (local >= threshold)
    order = np.argsort(-np.where(hit, local, -np.inf))
    return [labels[k] for k in order if hit[k]]


def fine(prep, comb, s0, n=17):
    """Peak of the comb correlation near s0 evaluated directly on a lag grid 8x finer than the
    FFT's (removes the sub-step bias of a parabola through three coarse lags): (s, err)."""
    grid, h = prep["grid"], prep["h"]
    d, var = prep[comb.data], prep["var"]
    c = comb.rest_ln + s0
    inside = (c >= grid[0]) & (c <= grid[-1])
    if not inside.any():
        return s0, np.nan
    c, w, sig = c[inside], comb.weights[inside], comb.sigmas[inside]
    half = int(np.ceil(4 * sig.max() / h)) + 3
    i0 = np.clip(np.round((c - grid[0]) / h).astype(int), 0, len(grid) - 1)
    idx = np.clip(i0[:, None] + np.arange(-half, half + 1)[None, :], 0, len(grid) - 1)
    x = grid[idx] - c[:, None]  # offset of each grid point from its tooth at s0
    dd, vv = d[idx], var[idx]
    offs = np.linspace(-1.5 * h, 1.5 * h, n)
    t = w[None, :, None] * np.exp(-0.5 * ((x[None] - offs[:, None, None])
                                          / sig[None, :, None]) ** 2)
    num = np.einsum("klm,lm->k", t, dd)
    den = np.einsum("klm,lm->k", t * t, vv)
    score = np.where(den > 0, num / np.sqrt(np.where(den > 0, den, 1.0)), 0.0)
    k = int(np.argmax(score))
    if 0 < k < n - 1:
        s_fine, _, _ = refine(offs, score, k)
    else:
        s_fine = offs[k]
    return s0 + float(s_fine), np.nan


def features(comb, lines):
    """Number of separate features among matched lines (lines closer than three tooth widths,
    e.g. Ca II H and Hε, count once)."""
    pos = {lab: (r, sg) for lab, r, sg in zip(comb.labels, comb.rest_ln, comb.sigmas)}
    xs = sorted(pos[lab] for lab in lines if lab in pos)
    n, last = 0, -np.inf
    for r, sg in xs:
        if r - last > 3 * sg:
            n += 1
            last = r
    return n


def break_strength(prep, s):
    """The 4000 A break of the data read at ln(1+z) = s: median f_nu over rest 4000-4100 A over
    that over 3850-3950 A (`_BREAK_RED`, `_BREAK_BLUE`); None when either band is not covered
    (less than 80% of its pixels usable) or the blue band's median is not positive."""
    blue = _band_median(prep, s, *_BREAK_BLUE, fnu=True)
    red = _band_median(prep, s, *_BREAK_RED, fnu=True)
    if blue is None or red is None or not blue > 0:
        return None
    return red / blue


def _band_median(prep, s, lo, hi, fnu=False):
    """Median flux (f_lambda, or f_nu ~ lambda^2 f_lambda) of the data over rest lo-hi Angstrom
    read at ln(1+z) = s; None when less than 80% of the band's pixels are usable."""
    lnlam, good, flux = prep["lnlam"], prep["good"], prep.get("flux")
    if flux is None:
        return None
    i0, i1 = np.searchsorted(lnlam, [np.log(lo) + s, np.log(hi) + s])  # lnlam ascends
    use = good[i0:i1]
    if i1 - i0 < 5 or use.sum() < 0.8 * (i1 - i0):
        return None
    f = flux[i0:i1][use]
    if fnu:
        f = f * np.exp(2 * lnlam[i0:i1][use])
    return float(np.median(f))


def break_factor(prep, s):
    """Score factor of an absorption-galaxy reading at ln(1+z) = s from its 4000 A break.

    An absorption-line galaxy's light is an old stellar population, whose strongest feature is
    the 4000 A break (`BREAK_OLD` and more).  A reading that puts rest 4000 A inside the data
    where the spectrum shows no break (a star's or a quasar's smooth continuum read at the wrong
    redshift, e.g. a star's Na D read as Mg II 2800 at z ~ 1.1) is implausible: its score is
    scaled linearly from 1 at a break of `BREAK_OLD` down to `BREAK_FLOOR` at a break of 1 or
    less.  The factor multiplies the score at the reading's peak and never moves z; readings
    whose rest 4000 A lies outside the data keep factor 1.
    """
    d = break_strength(prep, s)
    if d is None:
        return 1.0
    return float(np.clip(BREAK_FLOOR + (1 - BREAK_FLOOR) * (d - 1.0) / (BREAK_OLD - 1.0),
                         BREAK_FLOOR, 1.0))


#: Rest bands (vacuum Angstrom) below the Lyman limit (911.8 A) and of the far-UV continuum,
#: and the blue/red ratios of median f_lambda between which `lyman_factor` falls from 1 to
#: `BREAK_FLOOR`: galaxies at z > 3 show almost no light below the Lyman limit (common practice)
_LYMAN_BLUE, _LYMAN_RED = (870.0, 905.0), (1250.0, 1400.0)
LYMAN_RATIO = (0.1, 0.3)


def lyman_factor(prep, s):
    """Score factor of an absorption-galaxy reading at ln(1+z) = s from its Lyman limit.

    A galaxy read at a redshift that puts rest 870-905 A inside the data must be nearly dark
    there (the Lyman limit absorbs its ionising light); a star whose metal lines were read as
    the far-UV interstellar lines of a z ~ 3.4 galaxy (its Na D as C II 1335) is bright there.
    With r the median f_lambda over rest 870-905 A over that over 1250-1400 A, the score is
    scaled from 1 at r <= 0.1 down to `BREAK_FLOOR` at r >= 0.3 (`LYMAN_RATIO`).  Like
    `break_factor` it multiplies the score at the peak and never moves z; readings whose bands
    are not both in the data keep factor 1.
    """
    blue = _band_median(prep, s, *_LYMAN_BLUE)
    red = _band_median(prep, s, *_LYMAN_RED)
    if blue is None or red is None or not red > 0:
        return 1.0
    lo, hi = LYMAN_RATIO
    r = blue / red
    return float(np.clip(1.0 - (1.0 - BREAK_FLOOR) * (r - lo) / (hi - lo), BREAK_FLOOR, 1.0))


#: Quasar lines whose peaks mark the systemic redshift (common practice: the low-ionisation
#: broad lines, the Balmer lines and the narrow forbidden lines)
QUASAR_SYSTEMIC = ("Mg II 2799", "[Ne V] 3426", "[O II] 3728", "Hδ", "Hγ", "Hβ",
                   "[O III] 4959", "[O III] 5007", "Hα")
#: High-ionisation broad lines, blueshifted from the systemic redshift by a few hundred to a
#: few thousand km/s (common practice); the re-centring reads them `QUASAR_BLUESHIFT_KMS`
#: blueward of their laboratory wavelengths.
#: N V, blueshifted too, is left out: it sits on the red wing of Lyα and reads that wing.
QUASAR_BLUESHIFTED = ("Si IV+O IV] 1400", "C IV 1549", "He II 1640")
#: Broad lines blended on their blue side (C III] 1909 with Si III] 1892 and Al III 1857,
#: common practice): their peaks read blueward of the systemic redshift by a varying amount
QUASAR_BLENDED = ("C III] 1909",)
#: Typical blueshift of C IV from the systemic redshift of SDSS quasars, ~800 km/s (median of
#: the C IV - Mg II shift, Richards et al. 2002, AJ 124, 1; from memory, not looked up)
QUASAR_BLUESHIFT_KMS = 800.0
#: Half-width of the re-centring window around the comb's peak (km/s)
QUASAR_RECENTRE_KMS = 3000.0


def _tooth_scores(prep, rest_ln, weight, sigma, s0, n):
    """Matched-filter score of one tooth at ln(1+z) = s0 + j*h, j = -n..n, by direct
    correlation with the data (None when the tooth leaves the data)."""
    grid, h = prep["grid"], prep["h"]
    c = rest_ln + s0
    i0 = int(round((c - grid[0]) / h))
    k = int(np.ceil(4 * sigma / h))
    lo, hi = i0 - n - k, i0 + n + k + 1
    if lo < 0 or hi > len(grid):
        return None
    g = weight * np.exp(-0.5 * ((np.arange(-k, k + 1) * h + grid[i0] - c) / sigma) ** 2)
    num = np.correlate(prep["d_wide"][lo:hi], g, "valid")
    den = np.correlate(prep["var"][lo:hi], g * g, "valid")
    return np.where(den > 0, num / np.sqrt(np.where(den > 0, den, 1.0)), 0.0)


def _coverage(prep, c, half):
    """Share of the grid cells within +-half of ln lambda c that hold data clear of sky lines."""
    grid = prep["grid"]
    i0, i1 = np.searchsorted(grid, [c - half, c + half])
    return float(np.mean(prep.get("clean", prep["cov"])[i0:i1])) if i1 > i0 else 0.0


def systemic(prep, comb, s0, min_snr=5.0):
    """ln(1+z) of a quasar reading re-centred on the lines that mark the systemic redshift.

    The comb's peak ``s0`` rests on every broad line, but Lyα loses its blue half to the
    forest (its peak moves red), the high-ionisation lines (`QUASAR_BLUESHIFTED`) are
    blueshifted and C III] is blended on its blue side (`QUASAR_BLENDED`; common practice).
    Each line of those groups and of `QUASAR_SYSTEMIC` is matched alone within
    +-`QUASAR_RECENTRE_KMS` of ``s0``.  A line counts when its peak has a local S/N of
    ``min_snr`` or more, lies inside the window, and the data cover at least 95% of the span it
    is sought over (its tooth and the window) clear of sky lines: a line partly under a masked
    telluric band or an emission-only sky region (Na I D) reads off-centre, and one among the
    dense night-sky lines of the far red reads their residuals (on the SDSS quasars of
    ../shared/realdata, Mg II beyond 8900 A read up to 1200 km/s off).

    When systemic lines count, the reading moves to the median of their peaks weighted by
    weight x S/N.  Otherwise the weighted median of the blended line's peak and the
    high-ionisation lines' peaks (moved `QUASAR_BLUESHIFT_KMS` red) is averaged with ``s0``: the
    comb's reading is pulled red by Lyα, those lines read blue by an amount that varies from
    quasar to quasar, so the two errors have opposite signs and the mean halves both.  With no
    line counting the reading stays at ``s0``.  Only z moves; the score and the ranking stay
    those of the comb.
    """
    if prep.get("d_wide") is None:
        return s0
    h = prep["h"]
    n = int(np.ceil(QUASAR_RECENTRE_KMS / C_KMS / h))
    offs = h * np.arange(-n, n + 1)
    found = {"sys": [], "blue": [], "blend": []}
    for k, lab in enumerate(comb.labels):
        group = ("sys" if lab in QUASAR_SYSTEMIC else "blue" if lab in QUASAR_BLUESHIFTED
                 else "blend" if lab in QUASAR_BLENDED else None)
        sig = float(comb.sigmas[k])
        if group is None or _coverage(prep, comb.rest_ln[k] + s0, 1.5 * sig + offs[-1]) < 0.95:
            continue
        score = _tooth_scores(prep, comb.rest_ln[k], comb.weights[k], sig, s0, n)
        if score is None:
            continue
        i = int(np.argmax(score))
        if score[i] < min_snr or i in (0, len(offs) - 1):
            continue
        off = refine(offs, score, i)[0]
        if group == "blue":
            off += QUASAR_BLUESHIFT_KMS / C_KMS
        found[group].append((off, abs(comb.weights[k]) * score[i]))
    if found["sys"]:
        return s0 + _weighted_median(found["sys"])
    if found["blue"] or found["blend"]:
        return s0 + 0.5 * _weighted_median(found["blue"] + found["blend"])
    return s0


def _weighted_median(pairs):
    v, w = np.array(pairs).T
    o = np.argsort(v)
    c = np.cumsum(w[o])
    return float(v[o][np.searchsorted(c, 0.5 * c[-1])])
