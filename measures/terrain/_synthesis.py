"""Private: self-affine random surfaces and profiles by spectral synthesis.

Fourier amplitudes ~ |q|^-(H+1) in 2-D (power ~ q^-(2H+2)) and
~ q^-(H+1/2) for profiles (power ~ q^-(1+2H)), Gaussian random amplitudes
and uniform phases (D. Saupe 1988, "Algorithms for random fractals", in
Peitgen & Saupe (eds.), The Science of Fractal Images, Springer). Used by the
tests and the benchmark; the demo arena has its own generator.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray


def self_affine_surface(
    n: int,
    hurst: float,
    *,
    seed: int = 0,
    rms_m: float = 1.0,
    ny: int | None = None,
    q_roll_px: float | None = None,
) -> NDArray[np.float64]:
    """Periodic self-affine heightmap (ny, n) with rms ``rms_m``.

    ``q_roll_px``: optional roll-off wavelength in pixels; the spectrum is
    flat for longer wavelengths (a crossover, as on real ground).
    """
    ny = n if ny is None else ny
    rng = np.random.default_rng(seed)
    qy = np.fft.fftfreq(ny)[:, None]
    qx = np.fft.rfftfreq(n)[None, :]
    q = np.sqrt(qx**2 + qy**2)
    q[0, 0] = 1.0
    if q_roll_px is not None:
        q = np.maximum(q, 1.0 / q_roll_px)
    amp = q ** (-(hurst + 1.0))
    amp[0, 0] = 0.0
    coef = amp * (rng.normal(size=q.shape) + 1j * rng.normal(size=q.shape))
    z = np.fft.irfft2(coef, s=(ny, n))
    return z * (rms_m / z.std())


def self_affine_profile(
    n: int, hurst: float, *, seed: int = 0, rms_m: float = 1.0
) -> NDArray[np.float64]:
    """Periodic self-affine profile of ``n`` samples with rms ``rms_m``."""
    rng = np.random.default_rng(seed)
    q = np.fft.rfftfreq(n)
    q[0] = 1.0
    amp = q ** (-(hurst + 0.5))
    amp[0] = 0.0
    coef = amp * (rng.normal(size=q.size) + 1j * rng.normal(size=q.size))
    z = np.fft.irfft(coef, n)
    return z * (rms_m / z.std())
