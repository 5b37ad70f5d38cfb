"""The fits run with one BLAS thread and give the user's thread setting back afterwards."""

import astropy.units as u
import numpy as np
import pytest
from astropy.nddata import StdDevUncertainty
from specutils import Spectrum
from threadpoolctl import threadpool_info, threadpool_limits

from zline.physics._threads import one_blas_thread
from zline.physics.fitting import fit_line


def _blas_threads():
    return [lib["num_threads"] for lib in threadpool_info() if lib["user_api"] == "blas"]


def test_one_thread_inside_and_the_setting_restored_after():
    seen = []

    @one_blas_thread
    def inner():
        seen.append(("inner", _blas_threads()))
        return np.linalg.lstsq(np.eye(3), np.ones(3), rcond=None)[0]

    @one_blas_thread
    def outer():
        seen.append(("outer", _blas_threads()))
        return inner()

    assert _blas_threads(), "numpy and scipy load at least one BLAS"
    with threadpool_limits(limits=2, user_api="blas"):
        before = _blas_threads()
        np.testing.assert_allclose(outer(), 1.0)
        assert _blas_threads() == before
    assert [name for name, _ in seen] == ["outer", "inner"]
    assert all(n == 1 for _, counts in seen for n in counts)


def test_setting_restored_when_the_call_raises():
    @one_blas_thread
    def fails():
        raise RuntimeError("boom")

    with threadpool_limits(limits=2, user_api="blas"):
        before = _blas_threads()
        with pytest.raises(RuntimeError, match="boom"):
            fails()
        assert _blas_threads() == before
    assert fails.__name__ == "fails"


def test_fit_line_result_does_not_depend_on_the_thread_setting():
    # a Gaussian line on a flat continuum (invented): the same fit with the BLAS at 2 threads
    # outside gives the same numbers as with 1
    x = np.linspace(5000.0, 5100.0, 801)
    rng = np.random.default_rng(7)
    y = 1.0 + 5.0 * np.exp(-0.5 * ((x - 5050.0) / 2.0) ** 2) + rng.normal(0, 0.05, x.size)
    spec = Spectrum(flux=y * u.Jy, spectral_axis=x * u.AA,
                    uncertainty=StdDevUncertainty(np.full(x.size, 0.05)))
    out = []
    for n in (1, 2):
        with threadpool_limits(limits=n, user_api="blas"):
            f = fit_line(spec, 5049.0 * u.AA, window=[5020, 5080] * u.AA, fwhm=4 * u.AA)
        out.append((f.center.value, f.flux.value, f.center_err.value))
    np.testing.assert_allclose(out[0], out[1], rtol=1e-9)
    assert abs(out[0][0] - 5050.0) < 5 * out[0][2]
