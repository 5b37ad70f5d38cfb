"""A generated corpus of damaged and odd FITS files: each one loads with the right axis or fails
with a SpectrumFormatError naming the file; never another exception, never a hang."""

import gzip
import io
import re
import resource
import signal
import time
from dataclasses import dataclass

import numpy as np
import pytest
import astropy.units as u
from astropy.io import fits

from zline.physics.spectra import SpectrumFormatError, read_spectrum

REST_HI = 1.420405751e9  # Hz; the value only needs to be consistent inside the test


@dataclass
class Case:
    path: object
    expected: object  # ascending spectral-axis Quantity, or None: the file must be refused
    must_load: bool = False
    hdu: object = None
    flag: str = None  # a flag code the spectrum must carry when it loads
    full_uncertainty: bool = False  # the complete file has an uncertainty (or mask) to lose


#: Signs of a raw Python message (an exception's name or text) in what the user reads.
RAW_MESSAGE = re.compile(r"Traceback|\b\w*(Error|Exception)\b|invalid literal|has no attribute|"
                         r"NoneType|could not convert|unsupported operand|not subscriptable|"
                         r"out of bounds for axis|unexpected keyword|cannot reshape|"
                         r"object is not|\bdtype\(|numpy\.")


# --------------------------------------------------------------------- base files


def _pix(n, crpix):
    return np.arange(1, n + 1, dtype=float) - crpix  # FITS pixels count from 1 (Paper I)


def _base_linear(rng, n):
    crval, cdelt, crpix = rng.uniform(3500, 8000), rng.uniform(0.2, 3), rng.uniform(-5, 5)
    h = fits.PrimaryHDU(rng.normal(1, .1, n).astype("f4"))
    h.header.update(CTYPE1="WAVE", CUNIT1="Angstrom", CRVAL1=crval, CDELT1=cdelt, CRPIX1=crpix)
    return [h], (crval + cdelt * _pix(n, crpix)) * u.AA  # Paper I linear axis


def _base_nocunit(rng, n):
    crval, cdelt = rng.uniform(3500, 8000), rng.uniform(0.2, 3)
    h = fits.PrimaryHDU(rng.normal(1, .1, n).astype("f4"))
    h.header.update(CTYPE1="WAVE", CRVAL1=crval, CDELT1=cdelt, CRPIX1=1.0)
    return [h], (crval + cdelt * _pix(n, 1.0)) * u.AA


def _base_awav_cd(rng, n):
    crval, cd = rng.uniform(350, 800), rng.uniform(0.02, 0.3)
    h = fits.PrimaryHDU(rng.normal(1, .1, n).astype("f8"))
    h.header.update(CTYPE1="AWAV", CUNIT1="nm", CRVAL1=crval, CD1_1=cd, CRPIX1=1.0)
    return [h], (crval + cd * _pix(n, 1.0)) * u.nm


def _base_wavelog(rng, n):
    crval, cdelt, crpix = rng.uniform(3500, 8000), rng.uniform(0.5, 3), 1.0
    h = fits.PrimaryHDU(rng.normal(1, .1, n).astype("f4"))
    h.header.update(CTYPE1="WAVE-LOG", CUNIT1="Angstrom", CRVAL1=crval, CDELT1=cdelt,
                    CRPIX1=crpix)
    # Paper III logarithmic: S = S_r exp(w / S_r)
    return [h], crval * np.exp(cdelt * _pix(n, crpix) / crval) * u.AA


def _base_dcflag(rng, n):
    crval, cd = rng.uniform(3.55, 3.9), 1e-4
    h = fits.PrimaryHDU(rng.normal(1, .1, n).astype("f4"))
    h.header.update(CTYPE1="LINEAR", CRVAL1=crval, CD1_1=cd, CRPIX1=1.0, **{"DC-FLAG": 1})
    return [h], 10 ** (crval + cd * _pix(n, 1.0)) * u.AA


def _base_freq(rng, n):
    crval, cdelt = rng.uniform(1.40e9, 1.43e9), rng.uniform(1e3, 1e5)
    h = fits.PrimaryHDU(rng.normal(1, .1, n).astype("f4"))
    h.header.update(CTYPE1="FREQ", CUNIT1="Hz", CRVAL1=crval, CDELT1=cdelt, CRPIX1=1.0,
                    RESTFRQ=REST_HI)
    return [h], (crval + cdelt * _pix(n, 1.0)) * u.Hz


def _base_vrad(rng, n):
    crval, cdelt = rng.uniform(-200, 200), rng.uniform(0.5, 5)
    h = fits.PrimaryHDU(rng.normal(1, .1, n).astype("f4"))
    h.header.update(CTYPE1="VRAD", CUNIT1="km/s", CRVAL1=crval, CDELT1=cdelt, CRPIX1=1.0,
                    RESTFRQ=REST_HI)
    v = (crval + cdelt * _pix(n, 1.0)) * u.km / u.s
    return [h], np.sort(v.to(u.Hz, equivalencies=u.doppler_radio(REST_HI * u.Hz)))


def _base_ener(rng, n):
    crval, cdelt = rng.uniform(0.3, 5), rng.uniform(0.005, 0.05)
    h = fits.PrimaryHDU(rng.normal(1, .1, n).astype("f4"))
    h.header.update(CTYPE1="ENER", CUNIT1="keV", CRVAL1=crval, CDELT1=cdelt, CRPIX1=1.0)
    return [h], (crval + cdelt * _pix(n, 1.0)) * u.keV


def _base_table(rng, n):
    w = np.sort(rng.uniform(4000, 7000, n))
    w = np.unique(w)
    tab = fits.BinTableHDU.from_columns([
        fits.Column("WAVELENGTH", "D", unit="Angstrom", array=w),
        fits.Column("FLUX", "E", unit="erg/(s cm2 Angstrom)", array=rng.normal(1, .1, w.size)),
        fits.Column("ERROR", "E", unit="erg/(s cm2 Angstrom)", array=np.full(w.size, .1))])
    return [fits.PrimaryHDU(), tab], w * u.AA


def _base_table_nounit(rng, n):
    w = np.linspace(rng.uniform(4000, 5000), rng.uniform(6000, 7000), n)
    tab = fits.BinTableHDU.from_columns([
        fits.Column("lam", "D", array=w), fits.Column("flux", "E", array=rng.normal(1, .1, n)),
        fits.Column("ivar", "E", array=np.full(n, 100.0))])
    return [fits.PrimaryHDU(), tab], w * u.AA


def _base_onerow(rng, n):
    loglam = rng.uniform(3.55, 3.6) + 1e-4 * np.arange(n)
    tab = fits.BinTableHDU.from_columns([
        fits.Column("LOGLAM", f"{n}D", array=loglam[None]),
        fits.Column("FLUX", f"{n}E", unit="Jy", array=rng.normal(1, .1, (1, n)))])
    return [fits.PrimaryHDU(), tab], 10 ** loglam * u.AA


def _base_multiext(rng, n):
    crval, cdelt = rng.uniform(3500, 8000), rng.uniform(0.2, 3)
    f = fits.ImageHDU(rng.normal(1, .1, n).astype("f4"), name="FLUX")
    f.header.update(CTYPE1="WAVE", CUNIT1="Angstrom", CRVAL1=crval, CDELT1=cdelt, CRPIX1=1.0)
    return [fits.PrimaryHDU(), f, fits.ImageHDU(np.full(n, .1, "f4"), name="ERR"),
            fits.ImageHDU(np.zeros(n, "u1"), name="MASK")], (crval + cdelt * _pix(n, 1.0)) * u.AA


BASES = [_base_linear, _base_nocunit, _base_awav_cd, _base_wavelog, _base_dcflag, _base_freq,
         _base_vrad, _base_ener, _base_table, _base_table_nounit, _base_onerow, _base_multiext]
IMAGE_BASES = BASES[:8]


def _bytes(hdus):
    buf = io.BytesIO()
    fits.HDUList(hdus).writeto(buf)
    return buf.getvalue()


def _replace_card(raw, key, card):
    """Replace the whole 80-character card ``key`` in raw FITS bytes by ``card``."""
    tag = f"{key:<8}".encode()
    for i in range(0, raw.find(b"END" + b" " * 77) + 1, 80):
        if raw[i:i + 8] == tag:
            return raw[:i] + f"{card:<80}".encode()[:80] + raw[i + 80:]
    raise AssertionError(key)


def _patch_card(raw, key, value):
    """Overwrite the value field of header card ``key`` (columns 11-30) in raw FITS bytes."""
    tag = f"{key:<8}= ".encode()
    i = raw.find(tag)
    assert i >= 0 and i % 80 == 0, key
    field = f"{value:>20}".encode()[:20]
    return raw[:i + 10] + field + b" " * 50 + raw[i + 80:]


# --------------------------------------------------------------------- the corpus


def _generate(root):
    rng = np.random.default_rng(20311)
    cases = []
    k = 0

    def add(raw, expected, must_load=False, suffix=".fits", hdu=None, flag=None,
            full_uncertainty=False):
        nonlocal k
        path = root / f"c{k:04d}{suffix}"
        k += 1
        path.write_bytes(raw)
        cases.append(Case(path, expected, must_load, hdu, flag, full_uncertainty))

    for seed in range(6):
        for base in BASES:
            n = int(rng.integers(8, 40))
            hdus, axis = base(rng, n)
            raw = _bytes(hdus)
            add(raw, axis, must_load=True)
            add(gzip.compress(raw), axis, must_load=True, suffix=".fits.gz")
            has_unc = base in (_base_table, _base_table_nounit, _base_multiext)
            for frac in rng.uniform(0.05, 0.98, 3):  # truncated anywhere
                add(raw[:int(len(raw) * frac)], axis, full_uncertainty=has_unc)
            add(gzip.compress(raw)[: len(gzip.compress(raw)) // 2], axis, suffix=".fits.gz")
            add(raw + b"\0" * 100, axis)  # trailing junk
            big = [h.copy() for h in hdus]
            for i in range(300):  # huge header
                big[0].header.add_history(f"invented processing step {i}")
            add(_bytes(big), axis, must_load=True)
            if base in IMAGE_BASES:
                data_start = 2880 * int(np.ceil((raw.find(b"END" + b" " * 77) + 80) / 2880))
                flipped = bytearray(raw)
                for pos in rng.integers(data_start, len(raw), 5):
                    flipped[pos] ^= 0xFF  # data damage only: axis unchanged
                add(bytes(flipped), axis)
                for key, value in (("CDELT1", "0.0"), ("CDELT1", "'abc'"), ("CRVAL1", "'x'"),
                                   ("CUNIT1", "'bananas'"), ("CTYPE1", "'PIXEL'"),
                                   ("CTYPE1", "'FOO-BAR'"), ("NAXIS1", "0"), ("NAXIS1", "1")):
                    try:
                        patched = _patch_card(raw, key, value)
                    except AssertionError:
                        continue
                    add(patched, None)
                if "CD1_1" not in hdus[0].header:
                    add(raw.replace(b"CDELT1  =", b"CDELTX  =", 1), None)  # step missing
                    # NaN as text in CDELT1: astropy refuses to write it, so patch the bytes
                    add(_patch_card(raw, "CDELT1", "NAN"), None)
                add(raw.replace(b"CRVAL1  =", b"CRVALX  =", 1), None)  # no CRVAL1
                h = hdus[0].copy()
                h.data = np.full(n, np.nan, "f4")  # all-NaN flux
                add(_bytes([h]), None)
                h = hdus[0].copy()
                d = h.data.astype("f4")
                d[::3] = np.nan
                d[1] = np.inf
                h.data = d
                add(_bytes([h]), axis, must_load=True)
                h = hdus[0].copy()
                h.data = np.tile(h.data, (3, 1))  # 2D without row=
                add(_bytes([h]), None)
                h = hdus[0].copy()
                h.data = h.data[None, :]  # (1, N) degenerate: read as 1D
                add(_bytes([h]), axis, must_load=True)
                h = hdus[0].copy()
                h.data = np.tile(h.data, (2, 2, 1))  # 3D cube
                add(_bytes([h]), None)
                h = hdus[0].copy()
                h.header["BUNIT"] = "wibbles per fortnight"  # unreadable flux unit: loads
                add(_bytes([h]), axis, must_load=True)
                h = hdus[0].copy()
                h.data = np.round(h.data * 1000).astype(">i2")  # integer data
                add(_bytes([h]), axis, must_load=True)
            else:
                tab = [h for h in hdus if isinstance(h, fits.BinTableHDU)]
                if tab:
                    t = tab[0]
                    names = t.columns.names
                    cols = [fits.Column(c.name, c.format, unit=c.unit, array=t.data[c.name])
                            for c in t.columns]
                    # text in the flux column
                    txt = [c if c.name.lower() != "flux" else
                           fits.Column(c.name, "10A", array=np.array(["abc"] * len(t.data)))
                           for c in cols]
                    add(_bytes([fits.PrimaryHDU(), fits.BinTableHDU.from_columns(txt)]), None)
                    # non-monotonic axis
                    if t.data[names[0]].ndim == 1:
                        arr = np.array(t.data[names[0]], dtype=float)
                        arr[[1, 2]] = arr[[2, 1]]
                        bad = [fits.Column(c.name, c.format, unit=c.unit,
                                           array=arr if c.name == names[0] else t.data[c.name])
                               for c in t.columns]
                        add(_bytes([fits.PrimaryHDU(), fits.BinTableHDU.from_columns(bad)]),
                            None)
                        arr = np.array(t.data[names[0]], dtype=float)
                        arr[4] = np.nan  # NaN in the axis
                        bad = [fits.Column(c.name, c.format, unit=c.unit,
                                           array=arr if c.name == names[0] else t.data[c.name])
                               for c in t.columns]
                        add(_bytes([fits.PrimaryHDU(), fits.BinTableHDU.from_columns(bad)]),
                            None)
                        # descending rows: read reversed
                        rev = [fits.Column(c.name, c.format, unit=c.unit,
                                           array=np.asarray(t.data[c.name])[::-1])
                               for c in t.columns]
                        add(_bytes([fits.PrimaryHDU(), fits.BinTableHDU.from_columns(rev)]),
                            axis, must_load=True)
                    # unknown column names only
                    odd = [fits.Column(f"C{i}", c.format, array=t.data[c.name])
                           for i, c in enumerate(t.columns)]
                    add(_bytes([fits.PrimaryHDU(), fits.BinTableHDU.from_columns(odd)]), None)
                    # zero rows
                    empty = [fits.Column(c.name, c.format, unit=c.unit) for c in t.columns]
                    add(_bytes([fits.PrimaryHDU(), fits.BinTableHDU.from_columns(empty,
                                                                                 nrows=0)]),
                        None)
                    # unreadable wavelength unit
                    if t.columns[0].unit:
                        bu = [fits.Column(c.name, c.format,
                                          unit="bananas" if i == 0 else c.unit,
                                          array=t.data[c.name]) for i, c in enumerate(t.columns)]
                        add(_bytes([fits.PrimaryHDU(), fits.BinTableHDU.from_columns(bu)]),
                            None)
                else:  # multi-extension
                    wrong = [h.copy() for h in hdus]
                    wrong[2] = fits.ImageHDU(np.ones(n + 3, "f4"), name="ERR")
                    add(_bytes(wrong), None)
                    add(_bytes(hdus[:1]), None)  # empty primary only
                    named = [h.copy() for h in hdus]
                    add(_bytes(named), axis, must_load=True, hdu="FLUX")
                    add(_bytes(named), None, hdu=7)
    _named_cases(rng, add)
    # files that are not FITS at all
    for i in range(30):
        add(rng.integers(0, 256, int(rng.integers(1, 6000)), dtype=np.uint8).tobytes(), None)
    add(b"SIMPLE  =                    T" + b" " * 50, None)
    add(b"", None)
    add(b"SIMPLE  =                    T" + b" " * 50 + b"END" + b" " * 77, None)
    add(gzip.compress(b"not a fits file"), None, suffix=".fits.gz")
    return cases


def _image(n, rng, dtype="f4", **cards):
    h = fits.PrimaryHDU(rng.normal(1, .1, n).astype(dtype))
    h.header.update(cards)
    return h


def _named_cases(rng, add):
    """The damaged and mislabelled files reported by users, several of each."""
    for rep in range(5):
        n = int(rng.integers(20, 60))
        hdus, axis = _base_linear(rng, n)
        raw = _bytes(hdus)
        for key, value in (("NAXIS", "'abc'"), ("NAXIS1", f"{n}.5"), ("NAXIS1", f"{n}.0"),
                           ("NAXIS1", str(10 ** 13)), ("BITPIX", "7"), ("NAXIS", "-1")):
            add(_patch_card(raw, key, value), None)
        for card in ("BSCALE  = 'abc'", "BZERO   = 'x'", "BSCALE  = NAN"):
            add(_replace_card(raw, "CRPIX1", card), None)
        crval, cdelt = rng.uniform(4000, 6000), rng.uniform(0.5, 2)
        tab = _image(n, rng, CTYPE1="WAVE-TAB", CUNIT1="Angstrom", CRVAL1=crval, CDELT1=cdelt,
                     CRPIX1=1.0, PS1_0="WCS-TAB", PS1_1="WAVELENGTH")
        add(_bytes([tab]), None)
        add(_bytes([_image(n, rng, CTYPE1="WAVE", CUNIT1="Angstrom", CRVAL1=crval, CDELT1=1e-12,
                           CRPIX1=1.0)]), None)  # resolving power 5e15 per pixel
        # a log10 axis without DC-FLAG: refused (micrometres fit too) ...
        c0, c1 = rng.uniform(3.55, 3.65), 1e-4
        add(_bytes([_image(n, rng, CTYPE1="LINEAR", CRVAL1=c0, CD1_1=c1, CRPIX1=1.0)]), None)
        # ... read right where WFITTYPE says log-linear
        add(_bytes([_image(n, rng, CTYPE1="LINEAR", CRVAL1=c0, CD1_1=c1, CRPIX1=1.0,
                           WFITTYPE="LOG-LINEAR")]),
            10 ** (c0 + c1 * np.arange(n)) * u.AA, must_load=True, flag="axis-unit-assumed")
        # nm values without CUNIT1: refused; with it, read right
        lam0, step = rng.uniform(350, 900), rng.uniform(0.05, 0.3)
        add(_bytes([_image(n, rng, CTYPE1="WAVE", CRVAL1=lam0, CDELT1=step, CRPIX1=1.0)]), None)
        add(_bytes([_image(n, rng, CTYPE1="WAVE", CUNIT1="nm", CRVAL1=lam0, CDELT1=step,
                           CRPIX1=1.0)]), (lam0 + step * np.arange(n)) * u.nm, must_load=True)
        # GHz values without CUNIT1 (Hz by default) or stated as Hz: outside 1 km
        f0 = rng.uniform(1.40, 1.43)
        for cunit in ({}, {"CUNIT1": "Hz"}):
            add(_bytes([_image(n, rng, CTYPE1="FREQ", CRVAL1=f0, CDELT1=1e-4, CRPIX1=1.0,
                               **cunit)]), None)
        add(_bytes([_image(n, rng, CTYPE1="FREQ", CUNIT1="GHz", CRVAL1=f0, CDELT1=1e-4,
                           CRPIX1=1.0)]), (f0 + 1e-4 * np.arange(n)) * u.GHz, must_load=True)
        # km/s velocities without CUNIT1: refused; keV values without CUNIT1 (J): refused
        add(_bytes([_image(n, rng, CTYPE1="VRAD", CRVAL1=rng.uniform(-100, 100), CDELT1=2.0,
                           CRPIX1=1.0, RESTFRQ=REST_HI)]), None)
        add(_bytes([_image(n, rng, CTYPE1="ENER", CRVAL1=1.0, CDELT1=0.01, CRPIX1=1.0)]), None)
        # wavelengths at or below zero
        add(_bytes([_image(n, rng, CTYPE1="WAVE", CUNIT1="Angstrom", CRVAL1=-100.0, CDELT1=1.0,
                           CRPIX1=1.0)]), None)
        add(_bytes([_image(n, rng, CTYPE1="WAVE", CUNIT1="Angstrom", CRVAL1=0.0, CDELT1=1.0,
                           CRPIX1=1.0)]), None)
        w = np.linspace(-50.0, 5000.0, n)
        add(_bytes([fits.PrimaryHDU(), fits.BinTableHDU.from_columns([
            fits.Column("WAVE", "D", unit="Angstrom", array=w),
            fits.Column("FLUX", "E", array=np.ones(n))])]), None)
        # TFIELDS larger (or smaller) than the columns
        t_hdus, t_axis = _base_table(rng, n)
        t_raw = _bytes(t_hdus)
        for tf in ("5", "2", "'x'", "1000"):
            add(t_raw.replace(b"TFIELDS =                    3",
                              f"TFIELDS = {tf:>20}".encode(), 1), None)
        # truncated multi-extension files: inside the ERR extension, inside MASK
        m_hdus, m_axis = _base_multiext(rng, n)
        m_raw = _bytes(m_hdus)
        sizes = [len(_bytes(m_hdus[:k])) for k in range(1, 5)]  # ends of HDU 0..3
        add(m_raw[:sizes[1] + 80 * 3], m_axis, must_load=True, flag="file-truncated",
            full_uncertainty=True)  # inside the ERR header
        add(m_raw[:sizes[1] + 2880 + 10], m_axis, must_load=True, flag="file-truncated",
            full_uncertainty=True)  # inside the ERR data
        add(m_raw[:sizes[2] + 2880 + 1], m_axis, must_load=True, flag="file-truncated",
            full_uncertainty=True)  # inside the MASK data
        add(m_raw[:sizes[1] + 2880 + 10], None, hdu="ERR")  # the HDU asked for is incomplete
        nx = [h.copy() for h in m_hdus]
        nx[0].header["NEXTEND"] = 3
        add(_bytes(nx)[:sizes[1]], m_axis, must_load=True, flag="extension-missing",
            full_uncertainty=True)  # cut exactly after FLUX: only NEXTEND tells


@pytest.fixture(scope="session")
def corpus(tmp_path_factory):
    return _generate(tmp_path_factory.mktemp("corpus"))


class _Hang(Exception):
    pass


def _alarm(signum, frame):
    raise _Hang()


def test_corpus_is_large(corpus):
    assert len(corpus) >= 600
    assert sum(c.expected is None for c in corpus) >= 300
    assert sum(c.must_load for c in corpus) >= 100
    assert sum(c.flag is not None for c in corpus) >= 20


def _run(case):
    """(spectrum or None, message or None, problem or None) for one corpus file."""
    signal.alarm(10)
    try:
        return read_spectrum(case.path, hdu=case.hdu), None, None
    except SpectrumFormatError as exc:
        return None, str(exc), None
    except _Hang:
        return None, None, "hang (> 10 s)"
    except Exception as exc:  # noqa: BLE001 - anything else is the bug we look for
        return None, f"{type(exc).__name__}: {exc}", "raw exception"
    finally:
        signal.alarm(0)


def test_corpus_loads_right_or_fails_clearly(corpus):
    """Counts over the corpus: raw-Python messages, silent misreads, hangs, memory; all 0."""
    problems = {"raw": [], "misread": [], "hang": [], "unclear": []}
    start = time.perf_counter()
    rss0 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss  # KiB on Linux
    old = signal.signal(signal.SIGALRM, _alarm)
    n_loaded = n_refused = 0
    try:
        for case in corpus:
            name = case.path.name
            spec, message, problem = _run(case)
            if problem == "hang (> 10 s)":
                problems["hang"].append(name)
                continue
            if spec is None:
                n_refused += 1
                if problem or RAW_MESSAGE.search(message):
                    problems["raw"].append(f"{name}: {message}")
                if name not in message:
                    problems["unclear"].append(f"{name}: message lacks the file name: {message}")
                if case.must_load:
                    problems["unclear"].append(f"{name}: should load, refused: {message}")
                continue
            n_loaded += 1
            codes = {f["code"] for f in spec.meta["zline"]["flags"]}
            if case.expected is None:
                problems["misread"].append(f"{name}: loaded but should be refused "
                                           f"({sorted(codes)})")
                continue
            got = spec.spectral_axis.to(case.expected.unit, equivalencies=u.spectral())
            if got.shape != case.expected.shape or not np.allclose(got.value, case.expected.value,
                                                                   rtol=1e-9, atol=0):
                problems["misread"].append(f"{name}: wrong axis {got[:3]} vs "
                                           f"{case.expected[:3]}")
            if case.flag is not None and case.flag not in codes:
                problems["misread"].append(f"{name}: flag {case.flag!r} missing ({sorted(codes)})")
            if (case.full_uncertainty and spec.uncertainty is None
                    and not codes & {"file-truncated", "extension-missing"}):
                problems["misread"].append(f"{name}: uncertainty lost without a word")
    finally:
        signal.signal(signal.SIGALRM, old)
    elapsed = time.perf_counter() - start
    grown_mib = (resource.getrusage(resource.RUSAGE_SELF).ru_maxrss - rss0) / 1024
    counts = {key: len(value) for key, value in problems.items()}
    report = "\n".join(line for value in problems.values() for line in value[:15])
    print(f"corpus: {len(corpus)} files, {n_loaded} loaded, {n_refused} refused, counts {counts}, "
          f"peak memory grew {grown_mib:.0f} MiB, {elapsed:.1f} s")
    assert counts == {"raw": 0, "misread": 0, "hang": 0, "unclear": 0}, report
    assert n_loaded > 150 and n_refused > 300
    assert grown_mib < 500  # no header's promise is allocated
