"""Invented, seeded emission-line spectra at known redshifts for tests and benchmarks of batches.

`write_synthetic_spectra` is re-exported by `zline.physics.batch`.
"""

import os

import numpy as np

__all__ = ["write_synthetic_spectra"]


def write_synthetic_spectra(directory, n, seed=0, npix=3000, z_range=(0.05, 0.40)):
    """Write ``n`` invented emission-line spectra at seeded redshifts (for tests and benchmarks).

    Each file ``syn_NNNN.fits`` has a 1-D primary image with a linear vacuum-wavelength WCS
    (3700-9400 Angstrom), an ``ERR`` extension (1 sigma), a flat continuum with noise and the
    lines of the "galaxy-emission" set at their catalogue strengths (the default z range keeps
    Halpha inside the data: a line cut by the edge biases the scan); the true redshift is in the
    header keyword ``ZTRUE``.  Invented data: no real object.

    Returns
    -------
    dict
        File path (absolute str) -> true redshift.
    """
    import astropy.units as u  # noqa: PLC0415
    from astropy.io import fits  # noqa: PLC0415

    from zline.physics.catalog import line_set  # noqa: PLC0415

    os.makedirs(directory, exist_ok=True)
    rng = np.random.default_rng(seed)
    lam = np.linspace(3700.0, 9400.0, npix)
    step = lam[1] - lam[0]
    emis = line_set("galaxy-emission")
    rest = emis["rest"].to_value(u.AA)
    strength = np.asarray(emis["strength"], dtype=float)
    truth = {}
    for i in range(n):
        z = float(rng.uniform(*z_range))
        obs = rest * (1 + z)
        sigma = np.hypot(obs * 90.0 / 299792.458, 0.8 * step)
        inside = (obs > lam[0] - 30) & (obs < lam[-1] + 30)
        model = np.ones_like(lam)
        amp = 60.0 * rng.uniform(0.7, 1.3)
        for c, s, w in zip(obs[inside], sigma[inside], strength[inside]):
            model += amp * w / (np.sqrt(2 * np.pi) * s) * np.exp(-0.5 * ((lam - c) / s) ** 2)
        err = np.full_like(lam, 0.15)
        flux = model + rng.normal(0.0, 1.0, npix) * err
        hdr = fits.Header()
        hdr["CTYPE1"] = "WAVE"
        hdr["CUNIT1"] = "Angstrom"
        hdr["CRPIX1"] = 1.0
        hdr["CRVAL1"] = lam[0]
        hdr["CDELT1"] = step
        hdr["BUNIT"] = "1e-17 erg / (s cm2 Angstrom)"
        hdr["ZTRUE"] = (z, "invented true redshift")
        hdr["OBJECT"] = f"ZL-SYN-{seed}-{i:04d}"
        ehdr = fits.Header()
        ehdr["EXTNAME"] = "ERR"
        for key in ("CTYPE1", "CUNIT1", "CRPIX1", "CRVAL1", "CDELT1", "BUNIT"):
            ehdr[key] = hdr[key]
        path = os.path.abspath(os.path.join(directory, f"syn_{i:04d}.fits"))
        fits.HDUList([fits.PrimaryHDU(flux.astype(np.float32), header=hdr),
                      fits.ImageHDU(err.astype(np.float32), header=ehdr)]).writeto(
                          path, overwrite=True)
        truth[path] = z
    return truth
