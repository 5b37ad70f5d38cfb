"""A generated corpus of damaged and odd FITS files: each one loads with the right axis or fails
with a SpectrumFormatError naming the file; never another exception, never a hang."""

import gzip
import io
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

    def add(raw, expected, must_load=False, suffix=".fits", hdu=None):
        nonlocal k
        path = root / f"c{k:04d}{suffix}"
        k += 1
        path.write_bytes(raw)
        cases.append(Case(path, expected, must_load, hdu))

    for seed in range(6):
        for base in BASES:
            n = int(rng.integers(8, 40))
            hdus, axis = base(rng, n)
            raw = _bytes(hdus)
            add(raw, axis, must_load=True)
            add(gzip.compress(raw), axis, must_load=True, suffix=".fits.gz")
            for frac in rng.uniform(0.05, 0.98, 3):  # truncated anywhere
                add(raw[:int(len(raw) * frac)], axis)
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
    # files that are not FITS at all
    for i in range(30):
        add(rng.integers(0, 256, int(rng.integers(1, 6000)), dtype=np.uint8).tobytes(), None)
    add(b"SIMPLE  =                    T" + b" " * 50, None)
    add(b"", None)
    add(b"SIMPLE  =                    T" + b" " * 50 + b"END" + b" " * 77, None)
    add(gzip.compress(b"not a fits file"), None, suffix=".fits.gz")
    return cases


@pytest.fixture(scope="session")
def corpus(tmp_path_factory):
    return _generate(tmp_path_factory.mktemp("corpus"))


class _Hang(Exception):
    pass


def _alarm(signum, frame):
    raise _Hang()


def test_corpus_is_large(corpus):
    assert len(corpus) >= 500
    assert sum(c.expected is None for c in corpus) >= 150
    assert sum(c.must_load for c in corpus) >= 100


def test_corpus_loads_right_or_fails_clearly(corpus):
    problems = []
    start = time.perf_counter()
    old = signal.signal(signal.SIGALRM, _alarm)
    n_loaded = n_refused = 0
    try:
        for case in corpus:
            signal.alarm(10)
            try:
                spec = read_spectrum(case.path, hdu=case.hdu)
            except SpectrumFormatError as exc:
                n_refused += 1
                if case.path.name not in str(exc):
                    problems.append(f"{case.path.name}: message lacks the file name: {exc}")
                if case.must_load:
                    problems.append(f"{case.path.name}: should load, refused: {exc}")
                continue
            except _Hang:
                problems.append(f"{case.path.name}: hang (> 10 s)")
                continue
            except Exception as exc:  # noqa: BLE001 - anything else is the bug we look for
                problems.append(f"{case.path.name}: {type(exc).__name__}: {exc}")
                continue
            finally:
                signal.alarm(0)
            n_loaded += 1
            if case.expected is None:
                problems.append(f"{case.path.name}: loaded but should be refused")
                continue
            got = spec.spectral_axis.to(case.expected.unit, equivalencies=u.spectral())
            if got.shape != case.expected.shape or not np.allclose(got.value, case.expected.value,
                                                                   rtol=1e-9, atol=0):
                problems.append(f"{case.path.name}: wrong axis {got[:3]} vs {case.expected[:3]}")
    finally:
        signal.signal(signal.SIGALRM, old)
    elapsed = time.perf_counter() - start
    assert not problems, "\n".join(problems[:30]) + f"\n({len(problems)} problems)"
    assert n_loaded > 150 and n_refused > 150
    assert elapsed < 30.0
