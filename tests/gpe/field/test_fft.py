"""One suite runs every FFT backend; numpy.fft is the outside reference."""

import numpy as np
import pytest

from gpe.errors import VorthermError
from gpe.field.fft import (
    PyFFTWBackend,
    ScipyBackend,
    load_wisdom,
    make_fft,
    planning_options,
    save_wisdom,
)

SHAPE = (24, 32)
TOL = {np.complex128: 1e-12, np.complex64: 2e-5}


@pytest.fixture(params=["pyfftw", "scipy"])
def backend_name(request):
    return request.param


def _field(rng, dtype, shape=SHAPE):
    return (rng.standard_normal(shape) + 1j * rng.standard_normal(shape)).astype(dtype)


def _make(name, dtype, tmp_path):
    if name == "pyfftw":
        return make_fft(SHAPE, dtype, "pyfftw", threads=2, planner="FFTW_ESTIMATE",
                        wisdom=tmp_path / "w.json")
    return make_fft(SHAPE, dtype, name, threads=2)


@pytest.mark.parametrize("dtype", [np.complex128, np.complex64])
def test_backend_agrees_with_numpy_in_place_and_out_of_place(backend_name, dtype, rng, tmp_path):
    # Reference: numpy.fft.fft2 / ifft2 (independent pocketfft build), relative to the max.
    fft = _make(backend_name, dtype, tmp_path)
    data = _field(rng, dtype)
    expected = np.fft.fft2(data.astype(np.complex128))
    scale = np.abs(expected).max()
    a = fft.empty()
    a[...] = data
    out = fft.empty()
    assert fft.forward(a, out) is out
    np.testing.assert_allclose(out, expected, atol=TOL[dtype] * scale)
    np.testing.assert_array_equal(a, data)  # out-of-place must not touch its input
    fft.forward(a)  # in place
    np.testing.assert_allclose(a, expected, atol=TOL[dtype] * scale)
    fft.inverse(a)
    np.testing.assert_allclose(a, data, atol=TOL[dtype] * 10)
    assert a.dtype == np.dtype(dtype)


def test_unnormalised_inverse_is_n_times_numpy(backend_name, rng, tmp_path):
    fft = _make(backend_name, np.complex128, tmp_path)
    data = _field(rng, np.complex128)
    a = fft.empty()
    a[...] = data
    fft.inverse(a, normalise=False)
    np.testing.assert_allclose(a, np.fft.ifft2(data) * data.size, atol=1e-10)


def test_parseval(backend_name, rng, tmp_path):
    # [exact] Parseval for the unnormalised DFT: sum |f|^2 = (1/N) sum |F|^2.
    fft = _make(backend_name, np.complex128, tmp_path)
    a = fft.empty()
    a[...] = _field(rng, np.complex128)
    power = np.sum(np.abs(a) ** 2)
    fft.forward(a)
    assert np.sum(np.abs(a) ** 2) / a.size == pytest.approx(power, rel=1e-12)


def test_backends_agree_with_each_other(rng, tmp_path):
    data = _field(rng, np.complex128)
    results = []
    for name in ("pyfftw", "scipy"):
        fft = _make(name, np.complex128, tmp_path)
        a = fft.empty()
        a[...] = data
        results.append(fft.forward(a).copy())
    np.testing.assert_allclose(results[0], results[1], atol=1e-11 * np.abs(results[1]).max())


def test_unaligned_arrays_still_transform(rng, tmp_path):
    fft = _make("pyfftw", np.complex128, tmp_path)
    raw = np.empty(SHAPE[0] * SHAPE[1] * 16 + 8, np.uint8)
    a = raw[8:].view(np.complex128).reshape(SHAPE)  # deliberately 8 bytes off alignment
    data = _field(rng, np.complex128)
    a[...] = data
    fft.forward(a)
    np.testing.assert_allclose(a, np.fft.fft2(data), atol=1e-10)


def test_wrong_array_is_rejected(backend_name, tmp_path):
    fft = _make(backend_name, np.complex128, tmp_path)
    with pytest.raises(VorthermError, match="shape"):
        fft.forward(np.zeros((8, 8), np.complex128))
    with pytest.raises(VorthermError, match="complex64"):
        fft.forward(np.zeros(SHAPE, np.complex64))


def test_make_fft_validates_and_picks_backend(tmp_path):
    assert isinstance(make_fft(SHAPE, np.complex64, "scipy"), ScipyBackend)
    auto = make_fft(SHAPE, np.complex128, "auto", planner="FFTW_ESTIMATE", wisdom=False)
    assert isinstance(auto, PyFFTWBackend)
    assert auto.threads >= 1
    with pytest.raises(VorthermError, match="float64"):
        make_fft(SHAPE, np.float64)
    with pytest.raises(VorthermError, match="accepted"):
        make_fft(SHAPE, np.complex128, "mkl")


def test_reproducible_planning_takes_no_timed_plan(tmp_path):
    """The reproducible mode: with the "auto" backend it is scipy.fft (no planning at all);
    with pyFFTW asked for, the wisdom that a measured plan left in the process is forgotten
    first, because FFTW applies wisdom even to estimate-mode plans (FFTW 3 manual, "Words of
    Wisdom", from memory; seen here at 256^2: an estimate plan made after a measured one ran 5x
    faster)."""
    pyfftw = pytest.importorskip("pyfftw")
    assert isinstance(make_fft(SHAPE, np.complex128, "auto", **planning_options("reproducible")),
                      ScipyBackend)
    assert isinstance(make_fft(SHAPE, np.complex128, "auto", **planning_options("measured")),
                      PyFFTWBackend)
    pyfftw.forget_wisdom()
    make_fft(SHAPE, np.complex128, "pyfftw", threads=1, **planning_options("reproducible"))
    fresh = pyfftw.export_wisdom()                    # what estimate-mode planning alone holds
    make_fft(SHAPE, np.complex128, "pyfftw", threads=1, planner="FFTW_MEASURE",
             wisdom=tmp_path / "w.json")
    assert pyfftw.export_wisdom() != fresh            # the measured plan left wisdom
    make_fft(SHAPE, np.complex128, "pyfftw", threads=1, **planning_options("reproducible"))
    assert pyfftw.export_wisdom() == fresh            # the reproducible plan did not use it


def test_wisdom_round_trip_and_damaged_file(tmp_path):
    import pyfftw

    path = tmp_path / "sub" / "wisdom.json"
    pyfftw.forget_wisdom()  # wisdom loaded by earlier tests (or a warm cache) would mean nothing new to save
    make_fft((16, 16), np.complex128, "pyfftw", planner="FFTW_MEASURE", wisdom=path, threads=1)
    assert path.exists() and load_wisdom(path)
    path.write_text("not json")
    assert not load_wisdom(path)  # ignored, not fatal
    assert save_wisdom(path) and load_wisdom(path)
