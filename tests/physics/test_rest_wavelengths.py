"""zline's vacuum rest wavelengths against the SDSS pipeline's own line list.

Every SDSS spectrum file in ../shared/realdata carries the vacuum rest wavelengths its pipeline
fits (HDU 3, columns LINENAME and LINEWAVE; SDSS spectroscopic pipeline line list).  Where that
list quotes a doublet as one blend, zline's doublet centroid (plain mean) is compared.
"""

import astropy.units as u
import numpy as np
import pytest
from astropy.table import Table

from zline.physics.catalog import line_set, tabulated_lines

# zline label(s) -> SDSS LINENAME.  Left out on purpose: the list's "H_epsilon" (3890.15 A is H8)
# and "[Ne_III] 3970" (3971.12 A is Hepsilon), which name other lines than their labels, and
# "Mg_II 2799" (2800.32 A is neither line nor the mean of the doublet).
PAIRS = {
    ("[O II] 3726",): "[O_II] 3725", ("[O II] 3729",): "[O_II] 3727",
    ("[Ne III] 3869",): "[Ne_III] 3868", ("[O III] 4363",): "[O_III] 4363",
    ("[O III] 4959",): "[O_III] 4959", ("[O III] 5007",): "[O_III] 5007",
    ("[O I] 6300",): "[O_I] 6300", ("[S III] 6312",): "[S_III] 6312",
    ("[O I] 6364",): "[O_I] 6363", ("[N II] 6548",): "[N_II] 6548",
    ("[N II] 6583",): "[N_II] 6583", ("[S II] 6716",): "[S_II] 6716",
    ("[S II] 6731",): "[S_II] 6730", ("[Ar III] 7136",): "[Ar_III] 7135",
    ("C III] 1909",): "C_III] 1908",
    ("N V 1239", "N V 1243"): "N_V 1240", ("C IV 1548", "C IV 1551"): "C_IV 1549",
    ("Hα",): "H_alpha", ("Hβ",): "H_beta", ("Hγ",): "H_gamma", ("Hδ",): "H_delta",
}


@pytest.fixture(scope="module")
def sdss_lines(realdata):
    row = realdata[realdata["kind"] == "galaxy_emission"][0]
    t = Table.read(row["path"], hdu=3)
    names = [str(n).strip() for n in t["LINENAME"]]
    return {n: float(w) for n, w in zip(names, t["LINEWAVE"])}


def _ours():
    rest = {}
    for name in ("galaxy-emission", "nebular"):
        t = line_set(name, medium="vacuum")
        rest.update({str(lab): float(r.to_value(u.AA)) for lab, r in zip(t["label"], t["rest"])})
    return rest


@pytest.mark.parametrize("labels, sdss_name", list(PAIRS.items()))
def test_rest_wavelength_matches_sdss_pipeline_list(sdss_lines, labels, sdss_name):
    ours = _ours()
    centroid = float(np.mean([ours[lab] for lab in labels]))
    # SDSS spectroscopic pipeline line list (vacuum), HDU 3 LINEWAVE of the spectra files
    assert centroid == pytest.approx(sdss_lines[sdss_name], abs=0.011)


def test_confirmed_rows_name_the_list():
    t = tabulated_lines()
    confirmed = {lab for labels in PAIRS for lab in labels}
    for row in t:
        source = str(row["source"])
        if str(row["label"]) in confirmed:
            assert "SDSS spectroscopic pipeline line list" in source, row["label"]
            # a doublet's centroid is confirmed, the split between its lines stays recalled
            assert "from memory" not in source.split(";")[1], row["label"]


# Stellar absorption lines of the galaxy-absorption and stellar sets: standard-air wavelengths
# (NIST ASD, from memory), converted to vacuum by specutils (Morton 2000 formula), must give the
# sets' vacuum rest wavelengths to 0.01 A (under 1 km/s).  A set left in air would be off by
# ~1.1-2.3 A (85 km/s), the size of offset this guards against.
STELLAR_AIR = {
    "Ca II K": 3933.663, "Ca II H": 3968.468, "Ca I 4227": 4226.728,
    "Mg I b 5167": 5167.321, "Mg I b 5173": 5172.684, "Mg I b 5184": 5183.604,
    "Na I D2": 5889.951, "Na I D1": 5895.924,
    "Ca II 8498": 8498.02, "Ca II 8542": 8542.09, "Ca II 8662": 8662.14,
}


@pytest.mark.parametrize("set_name", ["galaxy-absorption", "stellar"])
def test_stellar_lines_are_published_air_wavelengths_in_vacuum(set_name):
    from specutils.utils.wcs_utils import air_to_vac

    t = line_set(set_name, medium="vacuum")
    ours = {str(lab): float(r.to_value(u.AA)) for lab, r in zip(t["label"], t["rest"])}
    for label, air in STELLAR_AIR.items():
        vac = float(air_to_vac(air * u.AA, scheme="inversion", method="Morton2000").value)
        assert ours[label] == pytest.approx(vac, abs=0.01), label
    air_set = line_set(set_name, medium="air")
    air_ours = {str(lab): float(r.to_value(u.AA)) for lab, r in zip(air_set["label"],
                                                                    air_set["rest"])}
    for label, air in STELLAR_AIR.items():
        assert air_ours[label] == pytest.approx(air, abs=0.01), label


# Balmer absorption of the galaxy-absorption set against the SDSS spectroscopic pipeline line list
# (vacuum, HDU 3 LINEWAVE); the list's entry named "H_epsilon" sits at H8's wavelength (see PAIRS).
ABSORPTION_BALMER = {"Hα": "H_alpha", "Hβ": "H_beta", "Hγ": "H_gamma", "Hδ": "H_delta",
                     "H8": "H_epsilon"}


def test_absorption_set_balmer_lines_match_sdss_pipeline_list(sdss_lines):
    t = line_set("galaxy-absorption", medium="vacuum")
    ours = {str(lab): float(r.to_value(u.AA)) for lab, r in zip(t["label"], t["rest"])}
    for label, sdss_name in ABSORPTION_BALMER.items():
        # SDSS spectroscopic pipeline line list (vacuum), HDU 3 LINEWAVE of the spectra files
        assert ours[label] == pytest.approx(sdss_lines[sdss_name], abs=0.011), label
