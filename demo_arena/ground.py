"""Synthetic arena ground for the demo study (invented data).

Self-affine random surfaces by Fourier filtering (spectral synthesis:
amplitudes proportional to |q|^-(H+1) in two dimensions; Saupe 1988, in
Peitgen & Saupe (eds.), *The Science of Fractal Images*), plus discrete
features (ripples, stones, boulders, cracks) so the trays span smooth to
rugged ground at the scale of a small quadruped's foot and stride.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

__all__ = ["TRAYS", "TraySpec", "make_tray", "self_affine_surface"]


@dataclass(frozen=True)
class TraySpec:
    """One invented arena tray.

    Lengths are in metres. ``hurst`` and ``rms_m`` describe the self-affine
    background; the feature fields add discrete structure. ``sq_m`` (when set)
    rescales the finished tray to that RMS height, so amplitude is chosen apart
    from structure: two trays with the same ``sq_m`` differ only in how their
    height is arranged (regular ripples or irregular scree).
    """

    key: str
    name: str
    kind: str
    notes: str
    hurst: float
    rms_m: float
    ripple_amplitude_m: float = 0.0
    ripple_wavelength_m: float = 0.03
    stones: int = 0
    stone_radius_m: tuple[float, float] = (0.002, 0.004)
    stone_height_m: tuple[float, float] = (0.001, 0.003)
    crack_cells: int = 0
    crack_depth_m: float = 0.0
    sq_m: float | None = None


# Seven invented trays on two axes: amplitude (Sq: low, about 0.4 mm, or tall, about 1.6 mm)
# and structure (regular ripples or irregular scree, i.e. high or low Hurst exponent and low
# or high entropy), plus a belt and a boulder field. Names and numbers are invented.
TRAYS: tuple[TraySpec, ...] = (
    TraySpec(
        "treadmill-belt",
        "Belt treadmill",
        "treadmill",
        "Invented demo arena: rubber belt, nearly flat.",
        0.8,
        0.00005,
    ),
    TraySpec(
        "tray-a-low-ripples",
        "Tray A: low regular ripples",
        "runway",
        "Invented demo arena: shallow wind-like ripples, regular.",
        0.9,
        0.00003,
        ripple_amplitude_m=0.0006,
        ripple_wavelength_m=0.03,
        sq_m=0.0004,
    ),
    TraySpec(
        "tray-b-low-scree",
        "Tray B: low irregular scree",
        "runway",
        "Invented demo arena: fine flat-lying grit, irregular, as high as Tray A.",
        0.15,
        0.0003,
        stones=1400,
        stone_radius_m=(0.0015, 0.003),
        stone_height_m=(0.0005, 0.0012),
        sq_m=0.0004,
    ),
    TraySpec(
        "tray-c-tall-ripples",
        "Tray C: tall regular ripples",
        "runway",
        "Invented demo arena: tall regular ripples across the runway.",
        0.9,
        0.00005,
        ripple_amplitude_m=0.0023,
        ripple_wavelength_m=0.03,
        sq_m=0.0016,
    ),
    TraySpec(
        "tray-d-cracked-crust",
        "Tray D: cracked crust",
        "runway",
        "Invented demo arena: dried crust broken into polygons (medium, mixed).",
        0.8,
        0.0004,
        crack_cells=40,
        crack_depth_m=0.003,
        sq_m=0.0009,
    ),
    TraySpec(
        "tray-e-coarse-scree",
        "Tray E: coarse irregular scree",
        "runway",
        "Invented demo arena: coarse gravel, irregular, as high as Tray C.",
        0.15,
        0.0010,
        stones=700,
        stone_radius_m=(0.003, 0.006),
        stone_height_m=(0.002, 0.004),
        sq_m=0.0016,
    ),
    TraySpec(
        "tray-f-boulders",
        "Tray F: boulder field",
        "runway",
        "Invented demo arena: scattered boulders on rough ground.",
        0.6,
        0.0025,
        stones=30,
        stone_radius_m=(0.015, 0.030),
        stone_height_m=(0.008, 0.016),
    ),
)


def self_affine_surface(
    shape: tuple[int, int], dx_m: float, *, hurst: float, rms_m: float, seed: int
) -> NDArray[np.float64]:
    """Periodic self-affine surface with Hurst exponent ``hurst`` and RMS height ``rms_m``.

    Fourier amplitudes are Gaussian with standard deviation ``|q|^-(H+1)``
    (power ``q^-(2H+2)``), random phases through the complex Gaussian, zero mean.
    """
    rng = np.random.default_rng(seed)
    ny, nx = shape
    qy = np.fft.fftfreq(ny, d=dx_m)[:, None]
    qx = np.fft.rfftfreq(nx, d=dx_m)[None, :]
    q = np.hypot(qx, qy)
    q[0, 0] = np.inf  # no mean
    amp = q ** (-(hurst + 1.0))
    coeff = amp * (rng.normal(size=q.shape) + 1j * rng.normal(size=q.shape))
    z = np.fft.irfft2(coeff, s=shape)
    return z * (rms_m / z.std())


def _stones(z: NDArray, dx_m: float, spec: TraySpec, rng: np.random.Generator) -> None:
    ny, nx = z.shape
    for _ in range(spec.stones):
        r = rng.uniform(*spec.stone_radius_m)
        h = rng.uniform(*spec.stone_height_m)
        cx, cy = rng.uniform(0, nx * dx_m), rng.uniform(0, ny * dx_m)
        half = int(np.ceil(r / dx_m)) + 1
        i0, j0 = int(cy / dx_m), int(cx / dx_m)
        ii = np.arange(max(i0 - half, 0), min(i0 + half + 1, ny))
        jj = np.arange(max(j0 - half, 0), min(j0 + half + 1, nx))
        yy, xx = np.meshgrid(ii * dx_m, jj * dx_m, indexing="ij")
        d2 = ((xx - cx) ** 2 + (yy - cy) ** 2) / r**2
        cap = h * np.sqrt(np.clip(1.0 - d2, 0.0, None))  # ellipsoidal cap
        block = z[np.ix_(ii, jj)]
        z[np.ix_(ii, jj)] = np.maximum(block, block.mean() + cap * (d2 < 1))


def _cracks(z: NDArray, dx_m: float, spec: TraySpec, rng: np.random.Generator) -> None:
    from scipy.spatial import cKDTree

    ny, nx = z.shape
    seeds = rng.uniform([0, 0], [nx * dx_m, ny * dx_m], size=(spec.crack_cells, 2))
    yy, xx = np.mgrid[0:ny, 0:nx] * dx_m
    dist, _ = cKDTree(seeds).query(np.column_stack([xx.ravel(), yy.ravel()]), k=2)
    # Cells near the bisector of the two nearest seeds lie on a crack.
    edge = (dist[:, 1] - dist[:, 0]).reshape(ny, nx)
    width = 0.0015
    z -= spec.crack_depth_m * np.clip(1.0 - edge / width, 0.0, None)


def make_tray(
    spec: TraySpec, *, length_m: float = 1.0, width_m: float = 0.3, dx_m: float = 0.001, seed: int
) -> NDArray[np.float64]:
    """Heightmap of one tray, shape ``(width/dx, length/dx)``, heights in metres."""
    rng = np.random.default_rng(seed)
    shape = (round(width_m / dx_m), round(length_m / dx_m))
    z = self_affine_surface(shape, dx_m, hurst=spec.hurst, rms_m=spec.rms_m, seed=seed)
    if spec.ripple_amplitude_m:
        x = np.arange(shape[1]) * dx_m
        wobble = 0.1 * np.sin(2 * np.pi * np.arange(shape[0])[:, None] * dx_m / 0.2)
        z += spec.ripple_amplitude_m * np.sin(
            2 * np.pi * (x[None, :] / spec.ripple_wavelength_m + wobble)
        )
    if spec.stones:
        _stones(z, dx_m, spec, rng)
    if spec.crack_cells:
        _cracks(z, dx_m, spec, rng)
    z = z - z.mean()
    if spec.sq_m is not None:
        z *= spec.sq_m / float(z.std())  # amplitude set apart from structure
    return z
