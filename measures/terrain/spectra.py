"""Power spectral densities of heightmaps and profiles, and the moments taken from them.

Normalisation (T. D. B. Jacobs, T. Junge & L. Pastewka 2017, "Quantitative
characterization of surface topography using spectral analysis", Surf.
Topogr.: Metrol. Prop. 5:013001): with wavevectors q in rad/m,

- 2-D: ``C(q) = |h~(q)|^2 / A`` with ``h~(q) = dx dy sum z e^{-i q.r}`` and
  ``A = nx dx ny dy``; then ``(2 pi)^-2 * integral C d^2q = Sq^2`` (Parseval).
  On the grid: ``sum(C) * dqx * dqy / (2 pi)^2 == mean(z^2)`` exactly without
  a window.
- isotropic (radial) average ``C_iso(q)``: ``Sq^2 = (1 / 2 pi) integral q C_iso dq``.
- 1-D profiles: ``C_1D(q) = |h~(q)|^2 / L``; ``Sq^2 = (1 / pi) integral_0^inf C_1D dq``.

A taper (window) multiplies the heights before the transform; the PSD is divided by
``mean(w^2)`` so that the power of a stationary surface is preserved.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import fft as sfft

from measures._validation import InvalidParameterError, check_choice, check_positive_int
from measures.terrain._surface import check_grid, fill_holes, inpaint_holes, level

__all__ = [
    "PSDAnisotropy",
    "ProfilePSD",
    "RadialPSD",
    "SurfacePSD",
    "profile_psd",
    "psd_anisotropy",
    "radial_psd",
    "rms_height_from_psd",
    "rms_slope_from_psd",
    "surface_psd",
]

_TAPERS = ("hann", "none")
_DETRENDS = ("plane", "mean", "none")


@dataclass(frozen=True, eq=False)
class SurfacePSD:
    """Two-sided 2-D PSD, centred (zero wavevector at ``[ny // 2, nx // 2]``).

    Attributes
    ----------
    qx : array (nx,), rad/m, ascending
    qy : array (ny,), rad/m, ascending
    psd : array (ny, nx), m^4
        C(q) in the Jacobs et al. (2017) normalisation (module docstring).
    taper, detrend : str
        What was applied before the transform.
    """

    qx: NDArray[np.float64]
    qy: NDArray[np.float64]
    psd: NDArray[np.float64]
    taper: str
    detrend: str


@dataclass(frozen=True, eq=False)
class RadialPSD:
    """Isotropic average of the 2-D PSD in log-spaced annuli.

    Attributes
    ----------
    q : array (n_bins,), rad/m
        Geometric centre of each non-empty annulus.
    psd : array (n_bins,), m^4
        Mean C over the annulus.
    counts : array (n_bins,), int
        Number of wavevectors averaged (on the full plane).
    q_edges : array (n_bins, 2), rad/m
        Lower and upper edge of each annulus.
    """

    q: NDArray[np.float64]
    psd: NDArray[np.float64]
    counts: NDArray[np.int64]
    q_edges: NDArray[np.float64]
    taper: str = field(default="hann")
    detrend: str = field(default="plane")


@dataclass(frozen=True, eq=False)
class ProfilePSD:
    """One-sided 1-D PSD averaged over profiles.

    Attributes
    ----------
    q : array (n // 2 + 1,), rad/m, from 0 to Nyquist
    psd : array like ``q``, m^3
        C_1D(q) (not doubled: ``(1/pi) * integral_0^inf C dq = Sq^2``).
    axis : int
        Axis along which the profiles run (1: along x, rows; 0: along y, columns).
    n_profiles : int
    n_samples : int
        Samples per profile.
    """

    q: NDArray[np.float64]
    psd: NDArray[np.float64]
    axis: int
    n_profiles: int
    n_samples: int
    taper: str = "hann"
    detrend: str = "linear"


@dataclass(frozen=True)
class PSDAnisotropy:
    """Anisotropy from the second spectral moments (the gradient covariance).

    Attributes
    ----------
    ratio : float
        sqrt(smaller / larger principal moment): 1 isotropic, 0 one-directional.
    wavevector_direction_rad : float
        Direction (from +x, counter-clockwise, in [0, pi)) of the principal
        axis with the larger slope variance, i.e. across the ridges.
    lay_direction_rad : float
        The perpendicular: the direction along which ridges run ("lay").
    moments : tuple of float
        (m_xx, m_xy, m_yy) in (m/m)^2: mean(z_x^2), mean(z_x z_y), mean(z_y^2).
    """

    ratio: float
    wavevector_direction_rad: float
    lay_direction_rad: float
    moments: tuple[float, float, float]


def _taper(n: int, kind: str) -> NDArray[np.float64]:
    if kind == "none":
        return np.ones(n)
    # Periodic Hann (sym=False) is the one whose power is exactly 3/8 on average.
    return 0.5 - 0.5 * np.cos(2.0 * np.pi * np.arange(n) / n)


def _prepared(
    z: ArrayLike,
    dx: float,
    dy: float | None,
    valid: ArrayLike | None,
    taper: str,
    detrend: str,
    fn: str,
    *,
    ndim: int = 2,
) -> tuple[NDArray[np.float64], float, float]:
    arr, dx_f, dy_f, mask = check_grid(z, dx, dy, valid, fn, ndim=ndim, min_size=4)
    check_choice("taper", taper, fn, _TAPERS)
    check_choice("detrend", detrend, fn, _DETRENDS)
    # Holes are interpolated, not mean-filled: a mean fill puts a step at every
    # hole edge whose white spectrum buries the short-wavelength power law.
    filled = inpaint_holes(np.nan_to_num(arr), mask)
    zl = level(filled, dx_f, dy_f, None, detrend)
    return zl, dx_f, dy_f


def _tapered_2d(zl: NDArray[np.float64], taper: str) -> tuple[NDArray[np.float64], float]:
    wy, wx = _taper(zl.shape[0], taper), _taper(zl.shape[1], taper)
    w2 = np.outer(wy, wx)
    return zl * w2, float(np.mean(w2**2))


def surface_psd(
    z: ArrayLike,
    dx: float,
    dy: float | None = None,
    *,
    taper: str = "hann",
    detrend: str = "plane",
    valid: ArrayLike | None = None,
) -> SurfacePSD:
    """Two-sided 2-D power spectral density of a heightmap.

    Parameters
    ----------
    z : array (ny, nx), float, m
    dx, dy : float, m
        Spacing along x (axis 1) and y (axis 0); ``dy`` defaults to ``dx``.
    taper : {"hann", "none"}
        Separable periodic Hann window (power corrected) or none.
    detrend : {"plane", "mean", "none"}
        Levelling before the window.
    valid : bool array, optional
        Holes are filled by harmonic interpolation first
        (:func:`measures.terrain._surface.inpaint_holes`).

    Returns
    -------
    SurfacePSD
        Normalised so that ``psd.sum() * dqx * dqy / (2 pi)^2`` equals the
        mean square of the (levelled) heights without a window.

    References
    ----------
    Jacobs, Junge & Pastewka (2017), Surf. Topogr.: Metrol. Prop. 5:013001.

    Examples
    --------
    >>> import numpy as np
    >>> z = np.random.default_rng(0).normal(size=(64, 64))
    >>> p = surface_psd(z, 0.5, taper="none", detrend="none")
    >>> dq = 2 * np.pi / (64 * 0.5)
    >>> bool(np.isclose(p.psd.sum() * dq * dq / (2 * np.pi) ** 2, np.mean(z**2)))
    True
    """
    zl, dx_f, dy_f = _prepared(z, dx, dy, valid, taper, detrend, "surface_psd")
    ny, nx = zl.shape
    zw, wpow = _tapered_2d(zl, taper)
    spec = np.abs(sfft.fft2(zw, workers=-1)) ** 2 * (dx_f * dy_f / (nx * ny) / wpow)
    qx = sfft.fftshift(sfft.fftfreq(nx, dx_f)) * 2 * np.pi
    qy = sfft.fftshift(sfft.fftfreq(ny, dy_f)) * 2 * np.pi
    return SurfacePSD(qx, qy, sfft.fftshift(spec), taper, detrend)


def radial_psd(
    z: ArrayLike,
    dx: float,
    dy: float | None = None,
    *,
    taper: str = "hann",
    detrend: str = "plane",
    valid: ArrayLike | None = None,
    bins_per_decade: int = 10,
) -> RadialPSD:
    """Isotropic (radially averaged) PSD in log-spaced bins of |q|.

    Bins run from the fundamental ``2 pi / max(L_x, L_y)`` to the smaller
    Nyquist wavenumber ``pi / max(dx, dy)`` (corners beyond that circle are
    left out, being sampled in some directions only). Empty bins are dropped.
    The half-plane from a real FFT is used with mode weights, so the average
    equals the full-plane one.

    Parameters
    ----------
    z, dx, dy, taper, detrend, valid
        As in :func:`surface_psd`.
    bins_per_decade : int
        Number of log-spaced annuli per decade of q.

    Returns
    -------
    RadialPSD

    References
    ----------
    Jacobs, Junge & Pastewka (2017), section on the isotropic PSD.
    """
    fn = "radial_psd"
    zl, dx_f, dy_f = _prepared(z, dx, dy, valid, taper, detrend, fn)
    bpd = check_positive_int("bins_per_decade", bins_per_decade, fn)
    spec = _half_spectrum(zl, dx_f, dy_f, taper)
    return _radial_from_half(spec, zl.shape, dx_f, dy_f, bpd, taper, detrend)


def _half_spectrum(
    zl: NDArray[np.float64], dx: float, dy: float, taper: str
) -> NDArray[np.float64]:
    """C(q) on the rfft half-plane of a prepared (filled, levelled) heightmap.

    The separable taper is applied by rows then columns, without the 2-D
    taper array (values equal ``_tapered_2d``'s to rounding).
    """
    ny, nx = zl.shape
    wy, wx = _taper(ny, taper), _taper(nx, taper)
    zw = zl * wy[:, None]
    zw *= wx[None, :]
    wpow = float(np.mean(wy**2) * np.mean(wx**2))
    half = sfft.rfft2(zw, workers=-1)
    del zw
    spec = half.real**2
    spec += half.imag**2
    spec *= dx * dy / (nx * ny) / wpow
    return spec


def _radial_from_half(
    spec: NDArray[np.float64],
    shape: tuple[int, ...],
    dx_f: float,
    dy_f: float,
    bpd: int,
    taper: str,
    detrend: str,
) -> RadialPSD:
    """The annulus averages of :func:`radial_psd` from a half-plane spectrum."""
    ny, nx = shape
    qx = sfft.rfftfreq(nx, dx_f) * 2 * np.pi
    qy = sfft.fftfreq(ny, dy_f) * 2 * np.pi
    qabs = np.sqrt(qy[:, None] ** 2 + qx[None, :] ** 2)
    weight = np.full(qx.size, 2.0)
    weight[0] = 1.0
    if nx % 2 == 0:
        weight[-1] = 1.0
    q_lo = 2 * np.pi / max(nx * dx_f, ny * dy_f)
    q_hi = np.pi / max(dx_f, dy_f)
    n_bins = max(1, int(np.ceil(np.log10(q_hi / q_lo) * bpd)))
    edges = q_lo * (q_hi / q_lo) ** (np.arange(n_bins + 1) / n_bins)
    # Start just below the fundamental so it falls in the first annulus.
    edges[0] *= 0.999
    # Bin index from the log directly (log-spaced edges): cheaper than searchsorted.
    with np.errstate(divide="ignore"):
        idx = np.floor(np.log(qabs.ravel() / edges[0]) / np.log(edges[2] / edges[1]))
    idx = np.where(np.isfinite(idx), idx, -1).astype(np.int64)
    idx = np.minimum(idx, n_bins - 1) if n_bins > 1 else np.zeros_like(idx)
    inside = (idx >= 0) & (idx < n_bins) & (qabs.ravel() <= q_hi)
    wts = np.broadcast_to(weight, qabs.shape).ravel()[inside]
    ii = idx[inside]
    sums = np.bincount(ii, weights=spec.ravel()[inside] * wts, minlength=n_bins)
    cnts = np.bincount(ii, weights=wts, minlength=n_bins)
    keep = cnts > 0
    centres = np.sqrt(edges[:-1] * edges[1:])
    return RadialPSD(
        q=centres[keep],
        psd=sums[keep] / cnts[keep],
        counts=np.rint(cnts[keep]).astype(np.int64),
        q_edges=np.column_stack([edges[:-1], edges[1:]])[keep],
        taper=taper,
        detrend=detrend,
    )


def _moments_from_half(
    spec: NDArray[np.float64], shape: tuple[int, ...], dx: float, dy: float
) -> tuple[float, PSDAnisotropy]:
    """rms slope and anisotropy of the full-plane PSD from its rfft half-plane.

    Each interior column stands for itself and its mirror mode (-kx, -ky),
    whose labels follow numpy's fftfreq (the Nyquist row and column keep
    their negative label), so the sums equal those over ``surface_psd``'s
    full plane (up to summation order).
    """
    ny, nx = shape
    # fftfreq's labels: for even nx the Nyquist column is -pi/dx, as on the full plane.
    qx = sfft.fftfreq(nx, dx)[: spec.shape[1]] * 2 * np.pi
    qy = sfft.fftfreq(ny, dy) * 2 * np.pi
    qy_m = qy[(ny - np.arange(ny)) % ny]  # label of the mirror row
    inner = np.ones(spec.shape[1], dtype=bool)
    inner[0] = False
    if nx % 2 == 0:
        inner[-1] = False
    col = spec.sum(axis=0)  # sum over rows of C: for the qx^2 moment
    m_xx = float(np.sum(qx**2 * col) + np.sum(qx[inner] ** 2 * col[inner]))
    row_all = spec.sum(axis=1)
    row_in = spec[:, inner].sum(axis=1)
    m_yy = float(np.sum(qy**2 * row_all) + np.sum(qy_m**2 * row_in))
    qc = spec @ qx  # per row: sum over columns of qx C
    qc_in = spec[:, inner] @ qx[inner]
    m_xy = float(np.sum(qy * qc) - np.sum(qy_m * qc_in))
    norm = (2 * np.pi / (nx * dx)) * (2 * np.pi / (ny * dy)) / (2 * np.pi) ** 2
    mxx, myy, mxy = m_xx * norm, m_yy * norm, m_xy * norm
    rms_slope = float(np.sqrt(mxx + myy))
    return rms_slope, _anisotropy(mxx, mxy, myy)


def profile_psd(
    z: ArrayLike,
    dx: float,
    dy: float | None = None,
    *,
    axis: int = 1,
    taper: str = "hann",
    detrend: str = "linear",
    valid: ArrayLike | None = None,
) -> ProfilePSD:
    """One-sided 1-D PSD of the profiles of a heightmap (or of one profile), averaged.

    Parameters
    ----------
    z : array (ny, nx) or (n,), float, m
    dx, dy : float, m
        Spacing along x (axis 1) and y (axis 0). For a 1-D ``z`` only ``dx``.
    axis : {1, 0}
        1: profiles along x (each row); 0: profiles along y (each column).
    taper : {"hann", "none"}
    detrend : {"linear", "mean", "none"}
        Per profile.
    valid : bool array, optional
        Holes are interpolated first (harmonic, for a heightmap) or set to
        the mean of the valid samples (a single profile).

    Returns
    -------
    ProfilePSD
        ``(1/pi) * sum(C) * dq`` over the one-sided q (with the end points
        counted once and the interior twice, as in the two-sided sum) is the
        mean square height.

    References
    ----------
    Jacobs, Junge & Pastewka (2017), 1-D PSD definition.
    """
    fn = "profile_psd"
    if axis not in (0, 1):
        raise InvalidParameterError("axis", fn, "0 or 1", axis)
    check_choice("detrend", detrend, fn, ("linear", "mean", "none"))
    arr, dx_f, dy_f, mask = check_grid(z, dx, dy, valid, fn, ndim=(1, 2), min_size=4)
    check_choice("taper", taper, fn, _TAPERS)
    filled = (
        fill_holes(np.nan_to_num(arr), mask)
        if arr.ndim == 1
        else inpaint_holes(np.nan_to_num(arr), mask)
    )
    if filled.ndim == 1:
        profiles, step, axis_used = filled[None, :], dx_f, 1
    else:
        profiles = filled if axis == 1 else filled.T
        step, axis_used = (dx_f if axis == 1 else dy_f), axis
    n = profiles.shape[1]
    if detrend == "linear":
        t = np.arange(n) - (n - 1) / 2
        slope = profiles @ t / (t @ t)
        profiles = profiles - profiles.mean(axis=1, keepdims=True) - slope[:, None] * t
    elif detrend == "mean":
        profiles = profiles - profiles.mean(axis=1, keepdims=True)
    w = _taper(n, taper)
    spec = np.abs(sfft.rfft(profiles * w, axis=1, workers=-1)) ** 2
    psd = spec.mean(axis=0) * step / n / float(np.mean(w**2))
    q = sfft.rfftfreq(n, step) * 2 * np.pi
    return ProfilePSD(q, psd, axis_used, profiles.shape[0], n, taper, detrend)


def _moment(psd: SurfacePSD | RadialPSD | ProfilePSD, power: int) -> float:
    """(2 pi)^-d * integral |q|^power C over the sampled wavevectors."""
    if isinstance(psd, SurfacePSD):
        dqx, dqy = np.diff(psd.qx[:2])[0], np.diff(psd.qy[:2])[0]
        qq = psd.qx[None, :] ** 2 + psd.qy[:, None] ** 2
        return float(np.sum(qq ** (power / 2) * psd.psd) * dqx * dqy / (2 * np.pi) ** 2)
    if isinstance(psd, RadialPSD):
        dq = psd.q_edges[:, 1] - psd.q_edges[:, 0]
        return float(np.sum(psd.q ** (power + 1) * psd.psd * dq) / (2 * np.pi))
    dq = psd.q[1] - psd.q[0]
    # Interior one-sided bins stand for +q and -q; zero (and Nyquist, for even n) once.
    wts = np.full(psd.q.size, 2.0)
    wts[0] = 1.0
    if psd.n_samples % 2 == 0:
        wts[-1] = 1.0
    return float(np.sum(wts * psd.q**power * psd.psd) * dq / (2 * np.pi))


def rms_height_from_psd(psd: SurfacePSD | RadialPSD | ProfilePSD) -> float:
    """Root-mean-square height (m) from the zeroth moment of a PSD.

    ``h_rms^2 = (2 pi)^-2 integral C d^2q`` (2-D), ``(1/2 pi) integral q C_iso dq``
    (radial) or ``(1/pi) integral_0^inf C_1D dq`` (profiles); Jacobs et al. 2017.
    """
    return float(np.sqrt(_moment(psd, 0)))


def rms_slope_from_psd(psd: SurfacePSD | RadialPSD | ProfilePSD) -> float:
    """Root-mean-square slope (m/m) from the second moment of a PSD.

    ``h'_rms^2 = (2 pi)^-2 integral |q|^2 C d^2q`` (2-D), ``(1/2 pi) integral
    q^3 C_iso dq`` (radial) or ``(1/pi) integral_0^inf q^2 C_1D dq`` (profiles);
    Jacobs et al. 2017. This is the continuous-derivative slope, without the
    ``sin(kh)/(kh)`` attenuation of grid central differences.

    Examples
    --------
    >>> import numpy as np
    >>> x = np.arange(256) * 0.01
    >>> z = np.tile(np.sin(2 * np.pi * x / 0.32), (16, 1))
    >>> p = surface_psd(z, 0.01, taper="none", detrend="none")
    >>> round(float(rms_slope_from_psd(p) / (2 * np.pi / 0.32 / np.sqrt(2))), 6)
    1.0
    """
    return float(np.sqrt(_moment(psd, 2)))


def psd_anisotropy(psd: SurfacePSD) -> PSDAnisotropy:
    """Principal second moments of a 2-D PSD: texture direction and strength.

    ``M = (2 pi)^-2 integral q q^T C d^2q`` is the covariance of the surface
    gradient (z_x, z_y). Its eigenvalues give the anisotropy ratio
    sqrt(l_min / l_max) and its leading eigenvector the wavevector direction.

    References
    ----------
    Longuet-Higgins (1957), Phil. Trans. R. Soc. A 249:321 (spectral moments
    of a random surface); Jacobs et al. (2017) for the normalisation.
    """
    if not isinstance(psd, SurfacePSD):
        raise InvalidParameterError("psd", "psd_anisotropy", "a SurfacePSD", psd)
    dqx, dqy = psd.qx[1] - psd.qx[0], psd.qy[1] - psd.qy[0]
    norm = dqx * dqy / (2 * np.pi) ** 2
    mxx = float(np.sum(psd.qx[None, :] ** 2 * psd.psd) * norm)
    myy = float(np.sum(psd.qy[:, None] ** 2 * psd.psd) * norm)
    mxy = float(np.sum(psd.qx[None, :] * psd.qy[:, None] * psd.psd) * norm)
    return _anisotropy(mxx, mxy, myy)


def _anisotropy(mxx: float, mxy: float, myy: float) -> PSDAnisotropy:
    vals, vecs = np.linalg.eigh(np.array([[mxx, mxy], [mxy, myy]]))
    ratio = float(np.sqrt(max(vals[0], 0.0) / vals[1])) if vals[1] > 0 else float("nan")
    lead = vecs[:, 1]
    angle = float(np.arctan2(lead[1], lead[0]) % np.pi)
    return PSDAnisotropy(ratio, angle, float((angle + np.pi / 2) % np.pi), (mxx, mxy, myy))
