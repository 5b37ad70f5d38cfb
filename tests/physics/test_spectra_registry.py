"""The layout registry: every layout module keeps the contract, and a new layout is one new
file (here written to a temporary folder added to the package path)."""

import sys
import textwrap

import numpy as np
import astropy.units as u
from astropy.io import fits
from astropy.tests.helper import assert_quantity_allclose

import zline.physics.spectra as spectra
from zline.physics.spectra import read_spectrum, registry


def test_every_layout_keeps_the_contract():
    mods = registry.layouts()
    assert {m.NAME for m in mods} >= {"image", "image-rows", "table"}
    for mod in mods:
        assert isinstance(mod.NAME, str) and isinstance(mod.PRIORITY, int)
        assert callable(mod.claims) and callable(mod.read)
    priorities = [m.PRIORITY for m in mods]
    assert priorities == sorted(priorities, reverse=True)


LAYOUT = '''
"""An invented layout: a table named TWOCOL with columns X (wavelength, nm) and Y (flux)."""
import numpy as np
import astropy.units as u

NAME = "two-columns"
PRIORITY = 50


def claims(hdul, index, opts):
    return hdul[index].name == "TWOCOL"


def read(hdul, index, ctx, opts):
    data = hdul[index].data
    return dict(axis=np.asarray(data["X"], float) * u.nm, kind="length", medium="air",
                flux=np.asarray(data["Y"], float), flux_unit_text="Jy", flux_unit_key="Y",
                unc=None, unc_kind=None, mask=None, layout=NAME, extra={})
'''


def test_a_new_layout_is_one_new_file(tmp_path, monkeypatch):
    folder = tmp_path / "more_layouts"
    folder.mkdir()
    (folder / "layout_twocol.py").write_text(textwrap.dedent(LAYOUT))
    monkeypatch.setattr(spectra, "__path__", [*spectra.__path__, str(folder)])
    monkeypatch.setattr(registry, "_LAYOUTS", None)
    monkeypatch.delitem(sys.modules, "zline.physics.spectra.layout_twocol", raising=False)
    x = np.linspace(500.0, 600.0, 30)
    tab = fits.BinTableHDU.from_columns([fits.Column("X", "D", array=x),
                                         fits.Column("Y", "E", array=np.ones(30))],
                                        name="TWOCOL")
    path = tmp_path / "twocol.fits"
    fits.HDUList([fits.PrimaryHDU(), tab]).writeto(path)
    spec = read_spectrum(path)
    assert spec.meta["zline"]["layout"] == "two-columns" and spec.meta["zline"]["medium"] == "air"
    assert_quantity_allclose(spec.spectral_axis, x * u.nm)
    assert spec.flux.unit == u.Jy
    monkeypatch.setattr(registry, "_LAYOUTS", None)  # the next test sees the package alone
