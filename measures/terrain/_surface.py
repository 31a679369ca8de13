"""Private helpers shared by the terrain families: input checks, levelling, filtering.

Heightmaps are ``z (ny, nx)`` float arrays in metres; axis 0 is y (spacing
``dy``), axis 1 is x (spacing ``dx``). A validity mask marks cells that hold
a measurement (True) and cells that are holes (False).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import fft as sfft

from measures._validation import (
    InsufficientDataError,
    InvalidParameterError,
    as_float_array,
    check_positive_float,
)

# ISO 16610-61 (areal Gaussian filter, common practice): weighting function
# s(r) = exp(-pi (r / (alpha * lambda_c))**2) / (alpha * lambda_c)**2 with
# alpha = sqrt(ln 2 / pi), so that the transmission at the cut-off wavelength
# lambda_c is exactly 50 %.
GAUSS_ALPHA = float(np.sqrt(np.log(2.0) / np.pi))

Float2D = NDArray[np.float64]


def check_grid(
    z: ArrayLike,
    dx: float,
    dy: float | None,
    valid: ArrayLike | None,
    function: str,
    *,
    ndim: int | tuple[int, ...] = 2,
    min_size: int = 3,
) -> tuple[Float2D, float, float, NDArray[np.bool_] | None]:
    """Validate a heightmap, its spacings and optional mask; NaN cells become holes."""
    arr = as_float_array("z", z, function, ndim=ndim, min_length=min_size, allow_nan=True)
    if arr.ndim == 2 and arr.shape[1] < min_size:
        raise InsufficientDataError(
            "z", function, f"an array with at least {min_size} columns", arr
        )
    dx_f = check_positive_float("dx", dx, function)
    dy_f = dx_f if dy is None else check_positive_float("dy", dy, function)
    mask: NDArray[np.bool_] | None = None
    if valid is not None:
        mask = np.asarray(valid, dtype=bool)
        if mask.shape != arr.shape:
            raise InvalidParameterError(
                "valid", function, f"a boolean array of shape {arr.shape}", mask
            )
    nan = np.isnan(arr)
    if nan.any():
        mask = ~nan if mask is None else (mask & ~nan)
    if mask is not None:
        if mask.all():
            mask = None
        elif mask.sum() < min_size**arr.ndim:
            raise InsufficientDataError(
                "valid", function, f"a mask with at least {min_size**arr.ndim} valid cells", mask
            )
    return arr, dx_f, dy_f, mask


def fill_holes(z: Float2D, valid: NDArray[np.bool_] | None) -> Float2D:
    """Copy of ``z`` with holes set to the mean of the valid cells (neutral for FFTs)."""
    if valid is None:
        return z.copy()
    out = z.copy()
    out[~valid] = float(np.mean(z[valid]))
    return out


def level(
    z: Float2D, dx: float, dy: float, valid: NDArray[np.bool_] | None, detrend: str
) -> Float2D:
    """Remove the mean ("mean") or the least-squares plane ("plane") of the valid cells.

    Holes are set to 0 after levelling so that they carry no height.
    """
    if valid is None and z.ndim == 2 and detrend == "plane":
        # Full regular grid: centred x and y are orthogonal, so the least-squares
        # plane separates into two 1-D projections (no n x 3 design matrix).
        # Written in place on one output array (the same operations, in the
        # same order, as the general expression below would do).
        xc = np.arange(z.shape[1]) - (z.shape[1] - 1) / 2
        yc = np.arange(z.shape[0]) - (z.shape[0] - 1) / 2
        bx = (z.mean(axis=0) @ xc) / (xc @ xc)
        by = (z.mean(axis=1) @ yc) / (yc @ yc)
        out = z - z.mean()
        out -= bx * xc[None, :]
        out -= by * yc[:, None]
        return out
    w = np.ones(z.shape, dtype=bool) if valid is None else valid
    zz = np.where(w, z, 0.0)
    if detrend == "none":
        out = zz.copy()
    elif detrend == "mean":
        out = zz - zz[w].mean()
    else:  # "plane": least squares z = a + b x + c y over valid cells
        if z.ndim == 1:
            x = np.arange(z.size) * dx
            coef = np.polyfit(x[w], zz[w], 1)
            out = zz - np.polyval(coef, x)
        elif valid is None:
            # Full regular grid: centred x and y are orthogonal, so the least-squares
            # plane separates into two 1-D projections (no n x 3 design matrix).
            xc = np.arange(z.shape[1]) - (z.shape[1] - 1) / 2
            yc = np.arange(z.shape[0]) - (z.shape[0] - 1) / 2
            bx = (zz.mean(axis=0) @ xc) / (xc @ xc)
            by = (zz.mean(axis=1) @ yc) / (yc @ yc)
            out = zz - zz.mean() - bx * xc[None, :] - by * yc[:, None]
        else:
            grid = np.indices(z.shape, dtype=np.float64)
            yy, xx = grid[0], grid[1]
            xx *= dx
            yy *= dy
            design = np.column_stack([np.ones(w.sum()), xx[w], yy[w]])
            coef = np.linalg.lstsq(design, zz[w], rcond=None)[0]
            out = zz - (coef[0] + coef[1] * xx + coef[2] * yy)
    out[~w] = 0.0
    return out


def _gauss_transfer(
    shape: tuple[int, ...], spacings: tuple[float, ...], cutoff_m: float
) -> NDArray[np.float64]:
    """Low-pass Gaussian transmission exp(-pi (alpha lambda_c f)^2) on an rfft grid."""
    freqs = [sfft.fftfreq(n, d) for n, d in zip(shape[:-1], spacings[:-1], strict=True)]
    freqs.append(sfft.rfftfreq(shape[-1], spacings[-1]))
    f2 = np.zeros(tuple(len(f) for f in freqs))
    for axis, f in enumerate(freqs):
        idx: list[slice | None] = [None] * len(freqs)
        idx[axis] = slice(None)
        f2 = f2 + f[tuple(idx)] ** 2
    return np.exp(-np.pi * (GAUSS_ALPHA * cutoff_m) ** 2 * f2)


def _mirror(a: NDArray[np.float64]) -> NDArray[np.float64]:
    """Even (mirror) extension to twice the size: periodic without edge jumps."""
    return np.pad(a, [(0, n) for n in a.shape], mode="symmetric")


def gaussian_lowpass(
    z: NDArray[np.float64],
    spacings: tuple[float, ...],
    cutoff_m: float,
    valid: NDArray[np.bool_] | None,
) -> NDArray[np.float64]:
    """Gaussian low-pass in the frequency domain, mirror-padded, hole-aware.

    Holes are handled by normalised convolution (Knutsson & Westin 1993):
    filter(z * w) / filter(w), so the missing cells neither pull the result
    to zero nor leave a ringing edge.
    """
    shape = z.shape
    ext_shape = tuple(2 * n for n in shape)
    transfer = _gauss_transfer(ext_shape, spacings, cutoff_m)
    axes = tuple(range(z.ndim))
    crop = tuple(slice(0, n) for n in shape)
    w = None if valid is None else valid.astype(np.float64)
    zw = z if valid is None else np.where(valid, z, 0.0)
    num = sfft.irfftn(sfft.rfftn(_mirror(zw), workers=-1) * transfer, ext_shape, axes=axes)
    num = num[crop]
    if w is None:
        return num
    den = sfft.irfftn(sfft.rfftn(_mirror(w), workers=-1) * transfer, ext_shape, axes=axes)[crop]
    with np.errstate(invalid="ignore", divide="ignore"):
        out = num / den
    # Far from any data the weight vanishes; fall back on the valid mean there.
    out[~np.isfinite(out) | (den < 1e-6)] = float(np.mean(z[valid]))
    return out


# Spectra of a scan with holes: zero (mean) filling puts a step at every hole
# edge, whose white spectrum swamps the steep short-wavelength end of rough
# ground (a 29 %-holed self-affine surface with H = 0.8 then fits H < 0).
# Interpolated holes carry no such steps; what the interpolation smooths is
# confined to wavelengths below a few hole sizes, which the fit band leaves out.
_INPAINT_SWEEPS = 40
_EXACT_FILL_MAX_HOLES = 200_000


def inpaint_holes(z: Float2D, valid: NDArray[np.bool_] | None) -> Float2D:
    """Copy of ``z`` with holes filled by smooth (harmonic) interpolation.

    Up to 200,000 hole cells: the exact solution of the 5-point Laplace
    equation with the measured cells as boundary values. Beyond: normalised
    convolution (Knutsson & Westin 1993) at doubling Gaussian widths until
    every hole has support, then 40 Jacobi sweeps of the same Laplace
    equation (the residual smoothing is local: holes of a few cells converge
    in a few sweeps, large ones keep the normalised-convolution surface).
    """
    if valid is None:
        return z.copy()
    hole = ~valid
    if int(hole.sum()) <= _EXACT_FILL_MAX_HOLES:
        from measures.terrain.pointcloud import _harmonic_fill

        return _harmonic_fill(np.where(valid, z, np.nan), valid)
    from scipy import ndimage

    zw = np.where(valid, z, 0.0)
    w = valid.astype(np.float64)
    out = zw.copy()
    todo = hole.copy()
    sigma = 1.0
    while todo.any():
        num = ndimage.gaussian_filter(zw, sigma, mode="mirror")
        den = ndimage.gaussian_filter(w, sigma, mode="mirror")
        ok = todo & (den > 0.05)
        out[ok] = num[ok] / den[ok]
        todo &= ~ok
        sigma *= 2.0
    hy, hx = np.nonzero(hole)
    ny, nx = z.shape
    nbrs = [
        (np.minimum(hy + 1, ny - 1), hx),
        (np.maximum(hy - 1, 0), hx),
        (hy, np.minimum(hx + 1, nx - 1)),
        (hy, np.maximum(hx - 1, 0)),
    ]
    for _ in range(_INPAINT_SWEEPS):
        out[hy, hx] = 0.25 * (out[nbrs[0]] + out[nbrs[1]] + out[nbrs[2]] + out[nbrs[3]])
    return out


def hole_scale_cells(valid: NDArray[np.bool_] | None) -> float:
    """Typical hole radius in cells: 95th percentile of the distance to data inside holes.

    0 without holes. Interpolation across holes alters wavelengths up to a
    few hole diameters; spectral fits start at 4 x this value (2 diameters).
    """
    if valid is None or valid.all():
        return 0.0
    from scipy import ndimage

    dist = ndimage.distance_transform_edt(~valid)
    return float(np.percentile(dist[~valid], 95))
