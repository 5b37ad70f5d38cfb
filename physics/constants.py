"""Physical constants for zline, read once from `astropy.constants`.

The Quantity constants live in `astropy.constants`; this module exposes the
name of the CODATA release in use (``CODATA_RELEASE``) and plain SI floats
for hot paths (convert once, then compute). Wavenumber constants are in
cm^-1, as spectroscopists quote term values.
"""
from typing import Final

import astropy
import astropy.constants as _const
import astropy.units as u

__all__ = [
    "CODATA_RELEASE",
    "c",
    "ckms",
    "h",
    "hbar",
    "e",
    "k_B",
    "m_e",
    "m_p",
    "m_n",
    "m_u",
    "alpha",
    "R_inf",
    "R_inf_invcm",
    "hartree",
    "eV",
    "a0",
    "lambda_c_bar",
    "mec2_invcm",
    "invcm_per_eV",
    "invcm_to_hz",
]


def _release_name() -> str:
    """Return the CODATA release astropy uses, e.g. ``"CODATA 2022"``."""
    ref = getattr(_const.h, "reference", "")
    if ref.upper().startswith("CODATA"):
        return ref.strip()
    tag = astropy.physical_constants.get()  # e.g. "codata2022"
    digits = "".join(ch for ch in tag if ch.isdigit())
    return f"CODATA {digits}" if digits else tag


#: Name of the CODATA adjustment behind every constant, e.g. "CODATA 2022".
CODATA_RELEASE: Final[str] = _release_name()

c: Final[float] = _const.c.si.value  #: speed of light, m s^-1
ckms: Final[float] = _const.c.to_value(u.km / u.s)  #: speed of light, km s^-1
h: Final[float] = _const.h.si.value  #: Planck constant, J s
hbar: Final[float] = _const.hbar.si.value  #: reduced Planck constant, J s
e: Final[float] = _const.e.si.value  #: elementary charge, C
k_B: Final[float] = _const.k_B.si.value  #: Boltzmann constant, J K^-1
m_e: Final[float] = _const.m_e.si.value  #: electron mass, kg
m_p: Final[float] = _const.m_p.si.value  #: proton mass, kg
m_n: Final[float] = _const.m_n.si.value  #: neutron mass, kg
m_u: Final[float] = _const.u.si.value  #: atomic mass constant (1 u), kg
alpha: Final[float] = _const.alpha.value  #: fine-structure constant
R_inf: Final[float] = _const.Ryd.si.value  #: Rydberg constant, m^-1
R_inf_invcm: Final[float] = _const.Ryd.to_value(u.cm**-1)  #: Rydberg constant, cm^-1
hartree: Final[float] = (2.0 * _const.Ryd * _const.h * _const.c).si.value  #: Hartree energy, J
eV: Final[float] = _const.e.si.value  #: one electronvolt, J
a0: Final[float] = _const.a0.si.value  #: Bohr radius, m
lambda_c_bar: Final[float] = (_const.hbar / (_const.m_e * _const.c)).si.value  #: reduced Compton wavelength, m
#: electron rest energy m_e c^2 as a wavenumber, cm^-1 (= 2 R_inf / alpha^2)
mec2_invcm: Final[float] = (_const.m_e * _const.c / _const.h).to_value(u.cm**-1)
#: wavenumber of one electronvolt, cm^-1
invcm_per_eV: Final[float] = (1.0 * u.eV).to_value(u.cm**-1, equivalencies=u.spectral())
#: frequency of one cm^-1, Hz
invcm_to_hz: Final[float] = _const.c.to_value(u.cm / u.s)
