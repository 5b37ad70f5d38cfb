"""Tests for zline.physics.frames against astropy directly (made-up site, targets and headers)."""

import warnings

import astropy.units as u
import numpy as np
import pytest
from astropy import constants as const
from astropy.coordinates import EarthLocation, SkyCoord, SpectralCoord
from astropy.io import fits
from astropy.tests.helper import assert_quantity_allclose
from astropy.time import Time

from zline.physics import frames as F

KMS = u.km / u.s
C_KMS = const.c.to_value(KMS)

# invented observatory and targets
SITE = EarthLocation.from_geodetic(lon=-105.25 * u.deg, lat=32.75 * u.deg, height=2210 * u.m)
WHEN = Time("2024-05-10T06:00:00", scale="utc")
TARGET = SkyCoord(210.3 * u.deg, 12.5 * u.deg)
TARGETS = [SkyCoord(ra * u.deg, dec * u.deg) for ra, dec in [(10, -40), (95, 5), (210.3, 12.5), (300, 60)]]
TIMES = [Time(t) for t in ("2024-01-15T03:00:00", "2024-04-20T12:00:00", "2024-09-01T22:30:00")]


@pytest.mark.parametrize("kind", ["barycentric", "heliocentric"])
@pytest.mark.parametrize("target", TARGETS)
def test_matches_astropy_radial_velocity_correction(kind, target):
    ours = F.velocity_correction(kind, WHEN, SITE, target)
    with F.offline_earth_orientation():
        ref = target.radial_velocity_correction(kind=kind, obstime=WHEN, location=SITE)
    assert_quantity_allclose(ours, ref, atol=1 * u.m / u.s)


@pytest.mark.filterwarnings("ignore::astropy.coordinates.spectral_coordinate.NoVelocityWarning")
@pytest.mark.filterwarnings("ignore::astropy.coordinates.spectral_coordinate.NoDistanceWarning")
@pytest.mark.parametrize("frame, astropy_frame", [("lsrk", "lsrk"), ("barycentric", "icrs")])
@pytest.mark.parametrize("target", TARGETS)
def test_agrees_with_spectralcoord(frame, astropy_frame, target):
    with F.offline_earth_orientation():
        sc = SpectralCoord(
            [5000.0] * u.AA, observer=SITE.get_itrs(obstime=WHEN), target=target
        )
        moved = sc.with_observer_stationary_relative_to(astropy_frame)
    implied = (moved.quantity[0] / sc.quantity[0] - 1.0) * C_KMS * KMS
    ours = F.velocity_correction(frame, WHEN, SITE, target)
    assert_quantity_allclose(ours, implied, atol=10 * u.m / u.s)


@pytest.mark.parametrize("a", F.FRAMES)
@pytest.mark.parametrize("b", F.FRAMES)
@pytest.mark.parametrize("convention", ["optical", "radio", "relativistic"])
def test_round_trip(a, b, convention):
    v = np.array([-350.0, 0.0, 1234.5, 45000.0]) * KMS
    there = F.convert_velocity(v, a, b, WHEN, SITE, TARGET, convention=convention)
    back = F.convert_velocity(there, b, a, WHEN, SITE, TARGET, convention=convention)
    assert_quantity_allclose(back, v, atol=1e-9 * KMS)
    z = np.array([0.0, 0.01, 2.5])
    zb = F.convert_redshift(F.convert_redshift(z, a, b, WHEN, SITE, TARGET), b, a, WHEN, SITE, TARGET)
    np.testing.assert_allclose(zb, z, rtol=0, atol=1e-12)


def test_composition_through_barycentre():
    # topo -> lsrk equals topo -> bary followed by bary -> lsrk (multiplicative Doppler factors)
    direct = F.convert_redshift(0.3, "topocentric", "lsrk", WHEN, SITE, TARGET)
    step = F.convert_redshift(0.3, "topocentric", "barycentric", WHEN, SITE, TARGET)
    step = F.convert_redshift(step, "barycentric", "lsrk", None, None, TARGET)
    assert direct == pytest.approx(step, rel=0, abs=1e-14)


def test_radio_velocity_goes_through_z():
    vcorr = F.velocity_correction("barycentric", WHEN, SITE, TARGET).to_value(KMS)
    v_radio = 3000.0
    z = 1.0 / (1.0 - v_radio / C_KMS) - 1.0  # radio convention, common practice
    z_new = (1.0 + z) * (1.0 + vcorr / C_KMS) - 1.0
    expected = C_KMS * z_new / (1.0 + z_new)
    got = F.convert_velocity(v_radio * KMS, "topocentric", "barycentric", WHEN, SITE, TARGET,
                             convention="radio")
    assert got.to_value(KMS) == pytest.approx(expected, abs=1e-9)
    # and it differs from naively adding the correction by ~ v*vcorr/c (not negligible)
    assert abs(got.to_value(KMS) - (v_radio + vcorr)) > 0.05


@pytest.mark.parametrize("when", TIMES)
@pytest.mark.parametrize("target", TARGETS)
def test_barycentric_size_bounded(when, target):
    # Earth's orbital speed ~29.8 km/s plus rotation <= 0.47 km/s (common practice)
    v = F.velocity_correction("barycentric", when, SITE, target)
    assert abs(v) < 30.8 * KMS
    # the site's rotational part alone: pole (no rotation) vs site differ by at most ~0.47 km/s
    geo = EarthLocation.from_geodetic(lon=0 * u.deg, lat=90 * u.deg, height=0 * u.m)
    diff = v - F.velocity_correction("barycentric", when, geo, target)
    assert abs(diff) < 0.47 * KMS


def test_orbital_amplitude_over_a_year():
    # a target on the ecliptic sees the full orbital swing of about +/-30 km/s (common practice)
    target = SkyCoord(lon=120 * u.deg, lat=0 * u.deg, frame="barycentrictrueecliptic").icrs
    months = Time("2024-01-01") + np.arange(0, 366, 15) * u.day
    v = [F.velocity_correction("barycentric", t, SITE, target).to_value(KMS) for t in months]
    assert 27 < max(v) < 31 and -31 < min(v) < -27


def test_sun_lsrk_motion_toward_apex():
    # Sun moves ~20 km/s toward RA 18h, Dec +30 relative to the LSRK (common practice, from memory)
    apex = SkyCoord("18h00m00s", "+30d00m00s")
    v = F.velocity_correction("lsrk", None, None, apex, from_frame="barycentric")
    assert abs(v.to_value(KMS)) == pytest.approx(20.0, abs=0.1)
    anti = SkyCoord("06h00m00s", "-30d00m00s")
    v_anti = F.velocity_correction("lsrk", None, None, anti, from_frame="barycentric")
    assert v_anti.to_value(KMS) == pytest.approx(-v.to_value(KMS), abs=1e-9)
    side = SkyCoord("06h00m00s", "+60d00m00s")  # 90 deg from the apex
    assert abs(F.velocity_correction("lsrk", None, None, side, from_frame="barycentric")) < 0.2 * KMS


def test_heliocentric_close_to_barycentric():
    # the Sun moves about the barycentre at <~ 15 m/s (common practice, from memory)
    d = F.velocity_correction("heliocentric", WHEN, SITE, TARGET, from_frame="barycentric")
    assert abs(d) < 0.02 * KMS


def _cards(cards):
    hdu = fits.PrimaryHDU(np.zeros(5, dtype=np.float32))
    hdu.header.update(cards)
    return hdu


def _header(**cards):
    # keyword arguments spell '-' as '_' (OBSGEO_X -> OBSGEO-X, DATE_OBS -> DATE-OBS)
    return _cards({k.replace("_", "-"): v for k, v in cards.items()})


def _read(tmp_path, hdu):
    path = tmp_path / "obs.fits"
    hdu.writeto(path, overwrite=True)
    return fits.getheader(path)


@pytest.mark.parametrize(
    "value, frame",
    [("TOPOCENT", "topocentric"), ("BARYCENT", "barycentric"), ("HELIOCEN", "heliocentric"),
     ("LSRK", "lsrk"), ("GEOCENTR", None), ("SOURCE", None), ("LSRD", None), ("WEIRD", None)],
)
def test_frame_from_header(tmp_path, value, frame):
    got = F.frame_from_header(_read(tmp_path, _header(SPECSYS=value)))
    assert got.frame == frame and got.value == value and got.keyword == "SPECSYS"


def test_frame_from_header_absent_and_velref():
    assert F.frame_from_header(fits.Header()).frame is None
    assert F.frame_from_header(fits.Header({"VELREF": 258})).frame == "heliocentric"


def test_location_variants_agree(tmp_path):
    x, y, z = (c.to_value(u.m) for c in SITE.geocentric)
    lat, lon, h = SITE.lat.deg, SITE.lon.deg, SITE.height.to_value(u.m)
    variants = [
        _header(OBSGEO_X=x, OBSGEO_Y=y, OBSGEO_Z=z),
        _header(OBSGEO_B=lat, OBSGEO_L=lon, OBSGEO_H=h),
        _header(SITELAT=lat, SITELONG=lon, SITEELEV=h),
        _header(SITELAT="+32:45:00", SITELONG="-105:15:00", SITEELEV=h),
        _header(LATITUDE=lat, LONGITUD=lon, ALTITUDE=h),
    ]
    for hdu in variants:
        obs = F.observation_from_header(_read(tmp_path, hdu))
        assert obs["location"] is not None, hdu.header
        d = np.linalg.norm([(a - b).to_value(u.m) for a, b in zip(obs["location"].geocentric, SITE.geocentric)])
        assert d < 0.01


def test_time_and_target_variants(tmp_path):
    hdr = _read(tmp_path, _header(DATE_OBS="2024-05-10T05:55:00", EXPTIME=600.0,
                                  RA="14:01:12.0", DEC="+12:30:00"))
    obs = F.observation_from_header(hdr)
    assert abs((obs["time"] - WHEN).to_value(u.s)) < 1e-3
    assert obs["target"].separation(TARGET) < 1 * u.arcsec
    assert obs["missing"] == ["location"]

    hdr = _read(tmp_path, _header(MJD_OBS=WHEN.mjd, RA=210.3, DEC=12.5))
    obs = F.observation_from_header(hdr)
    assert abs((obs["time"] - WHEN).to_value(u.s)) < 1e-3
    assert obs["target"].separation(TARGET) < 1 * u.arcsec

    hdu = fits.PrimaryHDU(np.zeros((2, 3, 4), dtype=np.float32))
    hdu.header.update({"CTYPE1": "RA---TAN", "CRVAL1": 210.3, "CTYPE2": "DEC--TAN", "CRVAL2": 12.5,
                       "CTYPE3": "WAVE", "CRVAL3": 5e-7})
    obs = F.observation_from_header(_read(tmp_path, hdu))
    assert obs["target"].separation(TARGET) < 1 * u.arcsec
    assert obs["missing"] == ["time", "location"]


def test_header_to_correction(tmp_path):
    x, y, z = (c.to_value(u.m) for c in SITE.geocentric)
    hdr = _read(tmp_path, _header(OBSGEO_X=x, OBSGEO_Y=y, OBSGEO_Z=z, DATE_OBS="2024-05-10T06:00:00",
                                  RA=210.3, DEC=12.5, SPECSYS="TOPOCENT"))
    obs = F.observation_from_header(hdr)
    assert obs["missing"] == [] and obs["frame"].frame == "topocentric"
    v = F.velocity_correction("barycentric", obs["time"], obs["location"], obs["target"])
    assert_quantity_allclose(v, F.velocity_correction("barycentric", WHEN, SITE, TARGET), atol=1 * u.mm / u.s)


def test_missing_pieces_named():
    with pytest.raises(F.FrameError, match=r"topocentric -> barycentric: no observatory location.*OBSGEO-X/Y/Z"):
        F.velocity_correction("barycentric", WHEN, None, TARGET)
    with pytest.raises(F.FrameError, match=r"no observing time.*DATE-OBS"):
        F.convert_redshift(0.1, "heliocentric", "barycentric", None, None, TARGET)
    with pytest.raises(F.FrameError, match=r"no target direction.*RA/DEC"):
        F.convert_velocity(10 * KMS, "barycentric", "lsrk", WHEN, SITE, None)
    with pytest.raises(F.FrameError, match=r"to_frame='galactic' is not a known frame.*'lsrk'"):
        F.velocity_correction("galactic", WHEN, SITE, TARGET)
    with pytest.raises(F.FrameError, match=r"v must be a velocity Quantity"):
        F.convert_velocity(10.0, "topocentric", "barycentric", WHEN, SITE, TARGET)
    with pytest.raises(F.FrameError, match=r"convention='weird'"):
        F.convert_velocity(10 * KMS, "topocentric", "barycentric", WHEN, SITE, TARGET, convention="weird")
    with pytest.raises(F.FrameError, match=r"DATE-OBS='yesterday'"):
        F.observation_from_header(fits.Header({"DATE-OBS": "yesterday"}))


def test_same_frame_needs_nothing():
    assert F.velocity_correction("lsrk", None, None, None, from_frame="lsrk") == 0 * KMS


def test_iers_settings_restored():
    from astropy.utils import iers

    before = (iers.conf.auto_download, iers.conf.auto_max_age)
    F.velocity_correction("barycentric", WHEN, SITE, TARGET)
    assert (iers.conf.auto_download, iers.conf.auto_max_age) == before


def test_future_date_offline_rephrased():
    # beyond the bundled IERS predictions: still a number, any astropy warning rephrased as ours
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the test's own Time in a 'dubious year'
        when = Time("2031-06-01T00:00:00")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        v = F.velocity_correction("barycentric", when, SITE, TARGET)
    assert abs(v) < 31 * KMS
    assert len(caught) == 1 and issubclass(caught[0].category, F.FrameAccuracyWarning)
    assert "reduced accuracy" in str(caught[0].message)


def test_header_velocity_correction(tmp_path):
    x, y, z = (c.to_value(u.m) for c in SITE.geocentric)
    full = {"OBSGEO-X": x, "OBSGEO-Y": y, "OBSGEO-Z": z, "DATE-OBS": "2024-05-10T06:00:00",
            "RA": 210.3, "DEC": 12.5, "SPECSYS": "TOPOCENT"}
    hdr = _read(tmp_path, _cards(full))
    assert_quantity_allclose(F.header_velocity_correction(hdr, "lsrk"),
                             F.velocity_correction("lsrk", WHEN, SITE, TARGET), atol=1 * u.mm / u.s)
    # already barycentric: the site is not needed to reach LSRK
    bary = {k: v for k, v in full.items() if not k.startswith("OBSGEO")} | {"SPECSYS": "BARYCENT"}
    assert_quantity_allclose(F.header_velocity_correction(_read(tmp_path, _cards(bary)), "lsrk"),
                             F.velocity_correction("lsrk", None, None, TARGET, "barycentric"),
                             atol=1e-9 * KMS)
    no_site = {k: v for k, v in full.items() if not k.startswith("OBSGEO")}
    with pytest.raises(F.FrameError, match=r"cannot convert topocentric -> barycentric: the header has no "
                                           r"observatory location \(OBSGEO-X/Y/Z.*SITELAT/SITELONG"):
        F.header_velocity_correction(_read(tmp_path, _cards(no_site)), "barycentric")
    with pytest.raises(F.FrameError, match=r"SPECSYS='GEOCENTR' names a frame zline does not convert"):
        F.header_velocity_correction(_read(tmp_path, _cards(full | {"SPECSYS": "GEOCENTR"})), "lsrk")
    no_frame = {k: v for k, v in full.items() if k != "SPECSYS"}
    with pytest.raises(F.FrameError, match=r"no SPECSYS \(or VELREF\).*pass from_frame="):
        F.header_velocity_correction(_read(tmp_path, _cards(no_frame)), "lsrk")
    v = F.header_velocity_correction(_read(tmp_path, _cards(no_frame)), "lsrk", from_frame="topocentric")
    assert_quantity_allclose(v, F.velocity_correction("lsrk", WHEN, SITE, TARGET), atol=1 * u.mm / u.s)


def test_unhandled_radesys_noted(tmp_path):
    obs = F.observation_from_header(_read(tmp_path, _cards({"RA": 210.3, "DEC": 12.5, "RADESYS": "GAPPT"})))
    assert obs["target"] is not None and any("GAPPT" in n for n in obs["notes"])
    obs = F.observation_from_header(_read(tmp_path, _cards({"DATE-OBS": "2024-05-10"})))
    assert any("no time of day" in n for n in obs["notes"])
