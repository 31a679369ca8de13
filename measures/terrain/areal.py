"""ISO 25178-2 areal surface-texture parameters and ISO 16610-61 style Gaussian filters.

Heightmaps are ``z (ny, nx)`` in metres; axis 0 is y (spacing ``dy``), axis 1
is x (spacing ``dx``). All results are SI: heights in m, Sdr as a fraction
(not percent), Sal in m, Str and Ssk/Sku dimensionless.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from typing import cast

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import fft as sfft
from scipy import ndimage

from measures._validation import InvalidParameterError, check_choice, check_positive_float
from measures.terrain._surface import check_grid, gaussian_lowpass, level

__all__ = [
    "ArealParameters",
    "areal_autocorrelation",
    "areal_parameters",
    "bandpass_surface",
    "gaussian_filter_surface",
]


@dataclass(frozen=True)
class ArealParameters:
    """ISO 25178-2 height, hybrid and spatial parameters of one heightmap.

    Attributes
    ----------
    Sa, Sq : float
        Arithmetic mean and root-mean-square height (m).
    Ssk, Sku : float
        Skewness and kurtosis of the height distribution (1).
    Sp, Sv, Sz : float
        Maximum peak height, maximum pit depth (positive) and their sum (m).
    Sdq : float
        Root-mean-square gradient (m/m).
    Sdr : float
        Developed interfacial area ratio, as a fraction (not percent).
    Sal : float
        Autocorrelation length: shortest lag at which the ACF falls to ``s`` (m);
        NaN when it never does within half the extent.
    Str : float
        Texture aspect ratio: Sal over the longest such lag (1, in [0, 1]).
    str_is_upper_bound : bool
        True when the ACF did not fall to ``s`` in some direction within half
        the extent; Str is then an upper bound.
    acf_threshold : float
        The ``s`` used for Sal and Str.
    n_valid : int
        Number of cells used.
    detrend : str
        Levelling applied before the heights ("mean" or "plane").
    band_m : tuple of float or None
        Wavelength band (m) the surface was restricted to, if any.
    """

    Sa: float
    Sq: float
    Ssk: float
    Sku: float
    Sp: float
    Sv: float
    Sz: float
    Sdq: float
    Sdr: float
    Sal: float
    Str: float
    str_is_upper_bound: bool
    acf_threshold: float
    n_valid: int
    detrend: str
    band_m: tuple[float | None, float | None] | None


def gaussian_filter_surface(
    z: ArrayLike,
    dx: float,
    dy: float | None = None,
    *,
    cutoff_m: float,
    kind: str = "lowpass",
    valid: ArrayLike | None = None,
) -> NDArray[np.float64]:
    """Gaussian S-filter (low-pass) or L-filter (high-pass) of a heightmap or profile.

    The filter is applied in the frequency domain with the ISO 16610-61
    Gaussian transmission ``H(f) = exp(-pi (alpha lambda_c f)^2)``,
    ``alpha = sqrt(ln 2 / pi)``, which passes 50 % of the amplitude at the
    cut-off wavelength ``lambda_c``. The high-pass is ``z - lowpass(z)``.
    The grid is mirror-extended to twice its size first, so the FFT sees no
    jump at the edges; holes (``valid`` False or NaN) are bridged by
    normalised convolution.

    Parameters
    ----------
    z : array (ny, nx) or (n,), float, m
        Heights.
    dx, dy : float, m
        Grid spacing along x (axis 1) and y (axis 0); ``dy`` defaults to ``dx``.
    cutoff_m : float, m
        Cut-off wavelength lambda_c.
    kind : {"lowpass", "highpass"}
        "lowpass" keeps wavelengths longer than the cut-off (S-filter, removes
        short-wave noise); "highpass" keeps shorter ones (L-filter, removes form).
    valid : bool array like ``z``, optional
        Cells that hold data.

    Returns
    -------
    array like ``z``, float, m
        Filtered heights (holes are filled with the filtered estimate).

    References
    ----------
    ISO 16610-61:2015, Geometrical product specifications — Filtration — Part
    61: Linear areal filters: Gaussian filters (weighting function, common practice).

    Examples
    --------
    >>> import numpy as np
    >>> x = np.arange(256) * 0.001
    >>> z = np.tile(np.sin(2 * np.pi * x / 0.032), (8, 1))
    >>> low = gaussian_filter_surface(z, 0.001, cutoff_m=0.032)
    >>> round(float(np.abs(low[4, 64:192]).max()), 2)  # 50 % at the cut-off
    0.5
    """
    fn = "gaussian_filter_surface"
    arr, dx_f, dy_f, mask = check_grid(z, dx, dy, valid, fn, ndim=(1, 2))
    cutoff = check_positive_float("cutoff_m", cutoff_m, fn)
    check_choice("kind", kind, fn, ("lowpass", "highpass"))
    spacings = (dx_f,) if arr.ndim == 1 else (dy_f, dx_f)
    filled = np.where(np.isnan(arr), 0.0, arr)
    low = gaussian_lowpass(filled, spacings, cutoff, mask)
    if kind == "lowpass":
        return low
    base = filled if mask is None else np.where(mask, filled, low)
    return base - low


def _check_band(band_m: object, function: str) -> tuple[float | None, float | None]:
    try:
        lo, hi = cast("tuple[object, object]", band_m)
    except (TypeError, ValueError):
        raise InvalidParameterError(
            "band_m", function, "a pair (lo, hi) of wavelengths in m", band_m
        ) from None
    lo_f = None if lo is None else check_positive_float("band_m[0]", lo, function)
    hi_f = None if hi is None else check_positive_float("band_m[1]", hi, function)
    if lo_f is not None and hi_f is not None and not lo_f < hi_f:
        raise InvalidParameterError("band_m", function, "a pair with lo < hi", band_m)
    return lo_f, hi_f


def bandpass_surface(
    z: ArrayLike,
    dx: float,
    dy: float | None = None,
    *,
    band_m: tuple[float | None, float | None],
    valid: ArrayLike | None = None,
) -> NDArray[np.float64]:
    """Restrict a heightmap to the wavelength band ``band_m = (lo, hi)`` in metres.

    An S-filter with cut-off ``lo`` removes shorter wavelengths, then an
    L-filter with cut-off ``hi`` removes longer ones (both Gaussian, see
    :func:`gaussian_filter_surface`); either side may be None to skip it.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.arange(512) * 0.001
    >>> z = np.tile(np.sin(2 * np.pi * x / 0.256) + 0.1 * np.sin(2 * np.pi * x / 0.008), (4, 1))
    >>> zb = bandpass_surface(z, 0.001, band_m=(0.002, 0.032))
    >>> bool(np.abs(zb[2, 128:384]).max() < 0.12)
    True
    """
    fn = "bandpass_surface"
    lo, hi = _check_band(band_m, fn)
    out = np.asarray(z, dtype=np.float64)
    if lo is not None:
        out = gaussian_filter_surface(out, dx, dy, cutoff_m=lo, kind="lowpass", valid=valid)
    if hi is not None:
        out = gaussian_filter_surface(out, dx, dy, cutoff_m=hi, kind="highpass", valid=valid)
    if lo is None and hi is None:
        out = out.copy()
    return out


def _gradient_mask(mask: NDArray[np.bool_] | None, shape: tuple[int, int]) -> NDArray[np.bool_]:
    """Cells whose central-difference stencil (or one-sided edge stencil) is all valid."""
    if mask is None:
        return np.ones(shape, dtype=bool)
    padded = np.pad(mask, 1, constant_values=True)
    return mask & padded[:-2, 1:-1] & padded[2:, 1:-1] & padded[1:-1, :-2] & padded[1:-1, 2:]


def areal_autocorrelation(
    z: ArrayLike,
    dx: float,
    dy: float | None = None,
    *,
    valid: ArrayLike | None = None,
    detrend: str = "mean",
) -> tuple[NDArray[np.float64], NDArray[np.float64], NDArray[np.float64]]:
    """Normalised areal autocorrelation function over lags up to half the extent.

    Computed by FFT with zero padding to twice the size (a linear, not
    circular, correlation): ``ACF(t) = sum z(r) z(r+t) / n_pairs(t) / Sq^2``,
    with ``n_pairs`` the autocorrelation of the validity mask, so holes and
    the shrinking overlap at long lags are both accounted for. ACF(0) = 1.

    Returns
    -------
    tx : array (2 * (nx // 2) + 1,), m
    ty : array (2 * (ny // 2) + 1,), m
    acf : array (len(ty), len(tx)), 1
        Centred: ``acf[len(ty) // 2, len(tx) // 2]`` is the zero lag.

    References
    ----------
    ISO 25178-2:2012, autocorrelation function (definition, common practice).
    """
    fn = "areal_autocorrelation"
    arr, dx_f, dy_f, mask = check_grid(z, dx, dy, valid, fn)
    check_choice("detrend", detrend, fn, ("mean", "plane"))
    zl = level(arr if mask is None else np.nan_to_num(arr), dx_f, dy_f, mask, detrend)
    ny, nx = arr.shape
    hy, hx = ny // 2, nx // 2
    return np.arange(-hx, hx + 1) * dx_f, np.arange(-hy, hy + 1) * dy_f, _acf_levelled(zl, mask)


def _acf_numerator_inplace(
    zl: NDArray[np.float64],
    shape: tuple[int, int],
    rows: NDArray[np.int_],
    cols: NDArray[np.int_],
    normalise_full: bool = False,
) -> NDArray[np.float64]:
    """sum z(r) z(r + t) at the kept lags: ducc0's transforms, in place on one array.

    The same separable float32 transforms as the scipy fallback, with the
    padded spectrum transformed, squared and transformed back in its own
    memory (one padded complex array instead of three). ``normalise_full``:
    return the full grid's normalised ACF instead (``acf_full_normalised``).
    """
    import ducc0

    from measures.terrain._fastfield import acf_full_normalised, power_inplace

    ny, nx = zl.shape
    threads = min(2, os.cpu_count() or 1)
    spec = np.zeros((shape[0], shape[1] // 2 + 1), dtype=np.complex64)
    padded = np.zeros((ny, shape[1]), dtype=np.float32)
    padded[:, :nx] = zl
    ducc0.fft.r2c(padded, axes=(1,), out=spec[:ny], nthreads=threads)
    del padded
    ducc0.fft.c2c(spec, axes=(0,), out=spec, nthreads=threads)
    power_inplace(spec)  # one compiled pass (numpy's re*re + im*im, same rounding)
    ducc0.fft.c2c(spec, axes=(0,), forward=False, inorm=2, out=spec, nthreads=threads)
    half = spec[rows]
    del spec
    out = ducc0.fft.c2r(
        half,
        axes=(1,),
        lastsize=shape[1],
        forward=False,
        inorm=2,
        nthreads=threads,
        allow_overwriting_input=True,
    )
    if normalise_full:
        return acf_full_normalised(out, np.asarray(cols, dtype=np.int64), ny, nx)
    return np.asarray(out[:, cols], dtype=np.float64)


def _acf_levelled(zl: NDArray[np.float64], mask: NDArray[np.bool_] | None) -> NDArray[np.float64]:
    """The centred ACF of :func:`areal_autocorrelation` from levelled heights (holes 0)."""
    ny, nx = zl.shape
    hy, hx = ny // 2, nx // 2
    # Padding: a circular correlation of length M holds the linear one at lag t
    # plus its alias at t - M (the linear one lives on |t| <= n - 1); for the kept
    # lags |t| <= n // 2 the alias is empty once M >= n + n // 2, so 1.5 n
    # (rounded up to a fast FFT size) is enough.
    shape = (
        sfft.next_fast_len(ny + hy, real=False),
        sfft.next_fast_len(nx + hx, real=True),
    )
    # float32 transforms: the ACF is read at thresholds like 0.2 of its peak, far
    # above float32's ~1e-6 relative FFT rounding. Separable transforms, cropped
    # to the lags kept as soon as possible: only the row-padded real grid and
    # one padded spectrum exist, and the inverse keeps only the rows it returns
    # before its last pass.
    rows = np.r_[shape[0] - hy : shape[0], 0 : hy + 1]
    cols = np.r_[shape[1] - hx : shape[1], 0 : hx + 1]
    try:
        num = _acf_numerator_inplace(zl, shape, rows, cols, normalise_full=mask is None)
        if mask is None:
            return num
    except ImportError:  # pragma: no cover - ducc0 is a declared dependency
        spec = sfft.rfft(zl.astype(np.float32), n=shape[1], axis=1, workers=-1)
        spec = sfft.fft(spec, n=shape[0], axis=0, workers=-1, overwrite_x=True)
        power = spec.real**2
        power += spec.imag**2
        del spec
        half = sfft.ifft(power, axis=0, workers=-1)[rows]
        del power
        num = sfft.irfft(half, n=shape[1], axis=1, workers=-1)[:, cols].astype(np.float64)
        del half
    if mask is None:
        # Full grid: the number of pairs at lag (ty, tx) is (ny - |ty|)(nx - |tx|),
        # exactly what the transform of the all-ones mask gives, without two FFTs;
        # every kept lag has pairs, so the division is done in place.
        ty, tx = np.abs(np.arange(-hy, hy + 1)), np.abs(np.arange(-hx, hx + 1))
        num /= (ny - ty).astype(np.float64)[:, None]
        num /= (nx - tx).astype(np.float64)[None, :]
        # A flat grid has zero variance: its ACF is undefined (NaN), as on the masked path.
        with np.errstate(invalid="ignore", divide="ignore"):
            num /= num[hy, hx]
        return num
    else:
        w = mask.astype(np.float64)
        cnt = sfft.irfft2(np.abs(sfft.rfft2(w, shape, workers=-1)) ** 2, shape, workers=-1)
        cnt = cnt[np.ix_(rows, cols)]
    var = num[hy, hx] / cnt[hy, hx]
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(cnt > 0.5, num / np.maximum(cnt, 0.5), np.nan) / var


def _decay_lengths(
    acf: NDArray[np.float64], dx: float, dy: float, s: float, n_dir: int = 180
) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
    """Distance along each direction in [0, pi) at which the ACF first falls to ``s``.

    Rays from the zero lag, sampled every half cell and bilinearly
    interpolated. Where the ACF stays above ``s`` the ray length is
    returned and flagged as not decayed.
    """
    hy, hx = acf.shape[0] // 2, acf.shape[1] // 2
    theta = np.arange(n_dir) * np.pi / n_dir
    c, sn = np.cos(theta), np.sin(theta)
    with np.errstate(divide="ignore"):
        rmax = np.minimum(hx * dx / np.abs(c), hy * dy / np.abs(sn))
    step = 0.5 * min(dx, dy)
    radii = np.arange(0.0, rmax.max() + step, step)
    rr = radii[None, :]
    cols = hx + rr * c[:, None] / dx
    rows = hy + rr * sn[:, None] / dy
    # NaN lags (no pairs) read as 1, i.e. not decayed; no copy when there are none.
    src = np.nan_to_num(acf, nan=1.0) if np.isnan(acf).any() else acf
    vals = ndimage.map_coordinates(src, [rows, cols], order=1)
    vals = np.where(rr <= rmax[:, None], vals, np.inf)
    below = vals <= s
    decayed = cast("NDArray[np.bool_]", below.any(axis=1))  # stubs: bool | array
    first = np.argmax(below, axis=1)
    out = rmax.copy()
    for i in np.flatnonzero(decayed):
        j = first[i]
        if j == 0:
            out[i] = 0.0
            continue
        v0, v1 = vals[i, j - 1], vals[i, j]
        frac = (v0 - s) / (v0 - v1) if v0 != v1 else 0.0
        out[i] = radii[j - 1] + frac * step
    return out, decayed


def areal_parameters(
    z: ArrayLike,
    dx: float,
    dy: float | None = None,
    *,
    valid: ArrayLike | None = None,
    detrend: str = "mean",
    band_m: tuple[float | None, float | None] | None = None,
    acf_threshold: float = 0.2,
) -> ArealParameters:
    """ISO 25178-2 areal parameters of a heightmap.

    Heights are taken after removing the mean (default) or the least-squares
    plane of the valid cells. Gradients are central differences
    (``numpy.gradient``: second order inside, one-sided at the edges); a cell
    contributes to Sdq and Sdr only when its whole stencil is valid. Central
    differences attenuate a sinusoid of wavenumber k by ``sin(k h) / (k h)``.

    Parameters
    ----------
    z : array (ny, nx), float, m
        Heights; NaN cells are treated as holes.
    dx, dy : float, m
        Spacing along x (axis 1) and y (axis 0); ``dy`` defaults to ``dx``.
    valid : bool array (ny, nx), optional
        Cells that hold data.
    detrend : {"mean", "plane"}
        Levelling before the parameters (the contract's default is "mean").
    band_m : (lo, hi) in m, optional
        Restrict the surface to this wavelength band first
        (:func:`bandpass_surface`).
    acf_threshold : float
        ``s`` for Sal and Str (ISO 25178-2 default 0.2).

    Returns
    -------
    ArealParameters

    References
    ----------
    ISO 25178-2:2012, Geometrical product specifications (GPS) — Surface
    texture: Areal — Part 2: Terms, definitions and surface texture parameters.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.arange(1000) * 0.01
    >>> z = np.tile(np.sin(2 * np.pi * x), (50, 1))
    >>> p = areal_parameters(z, 0.01)
    >>> round(p.Sq, 4), round(p.Sku, 3)
    (0.7071, 1.5)
    """
    fn = "areal_parameters"
    arr, dx_f, dy_f, mask = check_grid(z, dx, dy, valid, fn)
    check_choice("detrend", detrend, fn, ("mean", "plane"))
    s = check_positive_float("acf_threshold", acf_threshold, fn)
    band = None
    if band_m is not None:
        band = _check_band(band_m, fn)
        arr = bandpass_surface(np.nan_to_num(arr), dx_f, dy_f, band_m=band, valid=mask)
    zl = level(np.nan_to_num(arr), dx_f, dy_f, mask, detrend)
    return _areal_from_levelled(zl, dx_f, dy_f, mask, detrend, s, band)


def _areal_from_levelled(
    zl: NDArray[np.float64],
    dx_f: float,
    dy_f: float,
    mask: NDArray[np.bool_] | None,
    detrend: str,
    s: float,
    band: tuple[float | None, float | None] | None,
    gradient_sums: tuple[float, float] | None = None,
) -> ArealParameters:
    """:func:`areal_parameters` of heights already levelled (holes 0): no second levelling.

    ``gradient_sums``: (sum |grad z|^2, sum (sqrt(1 + |grad z|^2) - 1)) over
    every cell of a hole-free grid, when a compiled pass made them already.
    """
    h = zl if mask is None else zl[mask]
    if mask is None and gradient_sums is not None:
        # The compiled path (terrain_summary): one pass, no power temporaries.
        from measures.terrain._fastfield import height_moments

        m1, m2, m3, m4, h_max, h_min = height_moments(zl)
    else:
        m1, m2, m3, m4 = (
            float(np.mean(np.abs(h))),
            float(np.mean(h**2)),
            float(np.mean(h**3)),
            float(np.mean(h**4)),
        )
        h_max, h_min = float(h.max()), float(h.min())
    sq = float(np.sqrt(m2))
    sa = m1
    with np.errstate(invalid="ignore", divide="ignore"):
        ssk = float(m3 / sq**3) if sq > 0 else float(np.float64(m3) / np.float64(sq) ** 3)
        sku = float(m4 / sq**4) if sq > 0 else float(np.float64(m4) / np.float64(sq) ** 4)
    if gradient_sums is not None and mask is None:
        sdq = float(np.sqrt(gradient_sums[0] / zl.size))
        sdr = float(gradient_sums[1] / zl.size)
    else:
        # numpy's stubs cannot tell a 2-D input's gradient pair from a 1-D array
        pair = np.gradient(zl, dy_f, dx_f)
        gy, gx = cast("tuple[NDArray[np.float64], NDArray[np.float64]]", pair)
        del pair
        gmask = _gradient_mask(mask, zl.shape)
        g2 = (gx**2 + gy**2)[gmask]
        sdq = float(np.sqrt(np.mean(g2)))
        # sqrt(1 + g) - 1 written as g / (sqrt(1 + g) + 1): no cancellation on flat ground.
        sdr = float(np.mean(g2 / (np.sqrt(1.0 + g2) + 1.0)))
        del gx, gy, g2, gmask  # the ACF's padded transforms need the room on large scans
    acf = _acf_levelled(zl, mask)
    lengths, decayed = _decay_lengths(acf, dx_f, dy_f, s)
    if decayed.any() and sq > 0:
        sal = float(lengths[decayed].min())
        str_ = float(sal / lengths.max()) if lengths.max() > 0 else float("nan")
    else:
        sal, str_ = float("nan"), float("nan")
    sp, sv = h_max, -h_min
    return ArealParameters(
        Sa=sa,
        Sq=sq,
        Ssk=ssk,
        Sku=sku,
        Sp=sp,
        Sv=sv,
        Sz=sp + sv,
        Sdq=sdq,
        Sdr=sdr,
        Sal=sal,
        Str=str_,
        str_is_upper_bound=bool(not decayed.all()),
        acf_threshold=s,
        n_valid=int(h.size),
        detrend=detrend,
        band_m=band,
    )
