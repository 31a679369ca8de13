"""terrain_summary's shared, compiled paths give what the public estimators give.

The summary levels once, takes one periodogram for the radial PSD, the PSD
Hurst fit and the surface moments, computes the variogram and madogram from
one compiled pass of increments, box counts, slope/aspect histograms, Sdq/Sdr
and height moments in compiled passes, and builds its surrogates with table
phasors and an in-place inverse FFT. Each score is checked here against the
public estimator called alone on the same surface (numpy paths the summary no
longer takes), or against an independent reference (ordpy; a brute-force
float64 ACF; a brute-force 2-D conditional entropy; surrogates rebuilt with
numpy's generator, cos/sin and scipy's inverse FFT). Tolerances, per score:

- exact to 1e-12 relative: heights, gradients, spectra, Hurst fits, entropies
  of histograms and symbol fields (only summation order differs);
- Sal and Str: 1e-5 relative (the ACF uses float32 transforms; its padding
  changed from 2 n to 1.5 n, which moves float32 rounding, not the value);
- surrogate z-scores: the random stream is unchanged (numpy's float32 uniforms
  drawn from ``[seed, k]``), the surrogates agree to float32 rounding (phasors
  to 3e-7 rad), which can reorder near-equal neighbours in a few windows:
  |dz| <= 0.05 + 2e-3 |z|, far inside the Monte-Carlo spread of z
  (about z / sqrt(2 (n - 1)) for n surrogates).
"""

from __future__ import annotations

import math

import numpy as np
import ordpy
import pytest
from scipy import fft as sfft

from measures import terrain_summary
from measures.information.entropy import causal_neighbourhood, entropy_density_2d
from measures.information.symbolic import quantile_symbols
from measures.information.two_part import two_part_code
from measures.terrain._surface import hole_scale_cells, level
from measures.terrain._synthesis import self_affine_surface
from measures.terrain.areal import areal_autocorrelation, areal_parameters
from measures.terrain.fractal import hurst_exponent
from measures.terrain.spectra import psd_anisotropy, radial_psd, rms_slope_from_psd, surface_psd
from measures.terrain.summary import gradient_entropy

DX = 1e-3
EXACT = 1e-12
N_SUR = 9


def _surface(n: int, holes: bool = False) -> np.ndarray:
    z = self_affine_surface(n, 0.7, seed=11, rms_m=2e-3)
    # A tilt, so levelling has something to remove.
    z = z + 3e-4 * np.arange(n)[None, :] / n
    if holes:
        z = z.copy()
        z[np.random.default_rng(4).random(z.shape) < 0.03] = np.nan
    return z


def _rel(a: float, b: float) -> float:
    if a == b or (math.isnan(a) and math.isnan(b)):
        return 0.0
    return abs(a - b) / max(abs(a), abs(b))


@pytest.fixture(scope="module", params=[(256, False), (512, False), (256, True)])
def case(request):
    n, holes = request.param
    z = _surface(n, holes)
    params = {"n_surrogates": N_SUR if (n == 256 and not holes) else 0}
    return z, terrain_summary(z, DX, params=params), params


def test_areal_heights_and_gradients_match_areal_parameters(case):
    z, s, _ = case
    mask = ~np.isnan(z)
    ap = areal_parameters(z, DX, valid=mask, detrend="plane")
    for name, ref in [
        ("sq_m", ap.Sq),
        ("sa_m", ap.Sa),
        ("ssk", ap.Ssk),
        ("sku", ap.Sku),
        ("sp_m", ap.Sp),
        ("sv_m", ap.Sv),
        ("sz_m", ap.Sz),
        ("sdq", ap.Sdq),
        ("sdr", ap.Sdr),
    ]:
        assert _rel(s.score(name).value, ref) <= EXACT, name
    # Sal and Str: same ACF routine on both sides; its transforms are checked below.
    assert _rel(s.score("sal_m").value, ap.Sal) <= 1e-12
    assert _rel(s.score("str").value, ap.Str) <= 1e-12


def test_acf_matches_a_float64_zero_padded_reference():
    # Linear autocorrelation by a float64 FFT padded to 2 n (no aliasing at any
    # lag), normalised by the number of pairs (ISO 25178-2 definition).
    z = _surface(96)[:, :80]
    zl = level(z, DX, DX, None, "mean")
    _, _, acf = areal_autocorrelation(z, DX)
    ny, nx = zl.shape
    f = np.fft.rfft2(zl, (2 * ny, 2 * nx))
    full = np.fft.irfft2(np.abs(f) ** 2, (2 * ny, 2 * nx))
    hy, hx = ny // 2, nx // 2
    num = full[np.ix_(np.r_[-hy:0, 0 : hy + 1] % (2 * ny), np.r_[-hx:0, 0 : hx + 1] % (2 * nx))]
    ty, tx = np.abs(np.arange(-hy, hy + 1)), np.abs(np.arange(-hx, hx + 1))
    ref = num / np.outer(ny - ty, nx - tx)
    ref /= ref[hy, hx]
    np.testing.assert_allclose(acf, ref, atol=2e-6)


def test_spectral_scores_match_surface_and_radial_psd(case):
    z, s, _ = case
    mask = ~np.isnan(z)
    zl = level(np.nan_to_num(z), DX, DX, mask if not mask.all() else None, "plane")
    sp = surface_psd(zl, DX, valid=mask)  # full-plane FFT (the summary uses the half plane)
    an = psd_anisotropy(sp)
    assert _rel(s.score("rms_slope_psd").value, rms_slope_from_psd(sp)) <= EXACT
    assert _rel(s.score("psd_anisotropy_ratio").value, an.ratio) <= EXACT
    assert _rel(s.score("lay_direction_deg").value, math.degrees(an.lay_direction_rad)) <= EXACT
    rp = radial_psd(zl, DX, valid=mask)
    np.testing.assert_allclose(s.radial_q, rp.q, rtol=EXACT)
    np.testing.assert_allclose(s.radial_psd, rp.psd, rtol=EXACT)


@pytest.mark.parametrize("method", ["psd", "variogram", "madogram", "boxcount"])
def test_hurst_scores_match_hurst_exponent(case, method):
    z, s, _ = case
    mask = ~np.isnan(z)
    zl = level(np.nan_to_num(z), DX, DX, mask if not mask.all() else None, "plane")
    band = (s.score(f"hurst_{method}_band_lo_m").value, s.score(f"hurst_{method}_band_hi_m").value)
    # The common band (4 cells to 1/8 of the side), from 4 hole radii with holes.
    floor = 4 * hole_scale_cells(None if mask.all() else mask) * DX
    common = (max(4 * DX, floor), min(z.shape) * DX / 8)
    r = hurst_exponent(zl, DX, method=method, band=common, valid=mask)
    assert _rel(s.score(f"hurst_{method}").value, r.hurst) <= EXACT
    assert _rel(s.score(f"hurst_{method}_r2").value, r.r2) <= EXACT
    assert _rel(band[0], r.band[0]) <= EXACT and _rel(band[1], r.band[1]) <= EXACT


def test_gradient_entropies_match_gradient_entropy(case):
    z, s, _ = case
    mask = ~np.isnan(z)
    zl = level(np.nan_to_num(z), DX, DX, mask if not mask.all() else None, "plane")
    ge = gradient_entropy(zl, DX, valid=mask)
    assert _rel(s.score("slope_entropy_bits").value, ge.slope_entropy_bits) <= EXACT
    assert _rel(s.score("aspect_entropy_bits").value, ge.aspect_entropy_bits) <= EXACT
    np.testing.assert_array_equal(s.slope_counts, ge.slope_counts)


def _edge_grids():
    x = np.arange(48.0)
    rough = self_affine_surface(96, 0.7, seed=3, rms_m=2.0)
    return [
        np.zeros((40, 40)),  # slope 0 on the first edge, atan2(0, 0): aspect 180 on an edge
        np.add.outer(x, x),  # 45 degrees of aspect steps, slope atan(sqrt 2)
        np.add.outer(0 * x, x),  # slope exactly 45 degrees (an edge), aspect 180 (an edge)
        np.add.outer(-x, 0 * x),  # aspect 90 (an edge)
        np.add.outer(x * math.tan(math.radians(2.0)), 0 * x),  # slope at the 2-degree floor
        np.round(rough),  # quantised: many equal gradients, many exactly on edges
        rough * 1e3,  # nearly vertical: slopes close to 90 degrees (the top edge)
    ]


@pytest.mark.parametrize("k", range(7))
@pytest.mark.parametrize("bins", [(1.0, 10.0, 2.0), (0.7, 7.5, 0.0), (5.0, 45.0, 30.0)])
def test_compiled_gradient_histograms_match_gradient_entropy_on_edges(k, bins):
    # The compiled pass bins a fast arctangent and redoes cells within 1e-6 degrees
    # of an edge or the floor exactly: its counts must be gradient_entropy's, also
    # where many cells sit exactly on bin edges.
    from measures.terrain.summary import _gradient_entropy_full

    z = _edge_grids()[k]
    sb, ab, floor = bins
    p = {"slope_bin_deg": sb, "aspect_bin_deg": ab, "slope_floor_deg": floor}
    for dx, dy in [(1.0, 1.0), (0.5, 2.0)]:
        ref = gradient_entropy(
            z, dx, dy, slope_bin_deg=sb, aspect_bin_deg=ab, slope_floor_deg=floor
        )
        got, _ = _gradient_entropy_full(z, dx, dy, p)
        np.testing.assert_array_equal(got.slope_counts, ref.slope_counts)
        np.testing.assert_array_equal(got.aspect_counts, ref.aspect_counts)
        assert got.n_aspect_cells == ref.n_aspect_cells


def test_ordinal_scores_match_ordpy(case):
    z, s, _ = case
    if np.isnan(z).any():
        pytest.skip("holes are inpainted first; ordpy sees the raw field")
    zl = level(z, DX, DX, None, "plane")
    h, c = ordpy.complexity_entropy(zl, dx=2, dy=2)  # Ribeiro et al. (2012) 2-D patterns
    assert _rel(s.score("permutation_entropy_2d").value, h) <= EXACT
    assert _rel(s.score("js_complexity_2d").value, c) <= EXACT


def _brute_conditional_entropies(sym: np.ndarray, size: int) -> np.ndarray:
    """h(m) = H(site, N_m) - H(N_m), plug-in, over anchors where N_m fits (by np.unique)."""
    offs = causal_neighbourhood(size)
    ny, nx = sym.shape
    out = []
    for m in range(size + 1):
        o = offs[:m]
        r0 = max([0] + [-a for a, _ in o])
        c0 = max([0] + [-b for _, b in o])
        c1 = nx - max([0] + [b for _, b in o])
        words = [sym[r0:, c0:c1]] + [sym[r0 + a : ny + a, c0 + b : c1 + b] for a, b in o]
        stack = np.stack([w.ravel() for w in words], axis=1)

        def ent(rows: np.ndarray) -> float:
            _, cnt = np.unique(rows, axis=0, return_counts=True)
            p = cnt / cnt.sum()
            return float(-np.sum(p * np.log2(p)))

        out.append(ent(stack) - (ent(stack[:, 1:]) if m else 0.0))
    return np.array(out)


def test_entropy_density_matches_a_brute_force_count():
    # Feldman & Crutchfield (2003): h(m) = H[site | m causal neighbours].
    sym = quantile_symbols(_surface(64), n_bins=4)
    r = entropy_density_2d(sym, estimator="plugin", max_neighbourhood=5)
    np.testing.assert_allclose(
        r.conditional_entropy, _brute_conditional_entropies(sym, 5), atol=1e-12
    )


def test_field_scores_match_the_public_estimators(case):
    z, s, _ = case
    if np.isnan(z).any():
        pytest.skip("holes are inpainted first")
    zl = level(z, DX, DX, None, "plane")
    sym = quantile_symbols(zl, n_bins=4)
    ed = entropy_density_2d(sym)
    code = two_part_code(sym, alphabet_size=4)
    for name, ref in [
        ("entropy_density_2d_bits", ed.entropy_density),
        ("excess_entropy_2d_bits", ed.excess_entropy),
        ("effective_complexity_2d_bits", code.effective_complexity_bits),
        ("total_information_2d_bits_per_site", code.total_information_bits_per_symbol),
    ]:
        assert _rel(s.score(name).value, ref) <= EXACT, name


def _numpy_surrogates(x: np.ndarray, seed: int, n: int) -> list[np.ndarray]:
    """2-D phase surrogates the plain way (Theiler et al. 1992): numpy's float32
    uniforms from ``[seed, k]``, np.cos/np.sin, Hermitian real columns, scipy's irfft2."""
    x32 = x.astype(np.float32)
    amp = np.abs(sfft.rfft2(x32)).astype(np.float32)
    ny, nx = x.shape
    out = []
    for k in range(n):
        phi = np.random.default_rng([seed & 0xFFFFFFFF, k]).random(amp.shape, dtype=np.float32)
        phi *= np.float32(2 * math.pi)
        f = (amp * (np.cos(phi) + 1j * np.sin(phi))).astype(np.complex64)
        half = np.arange(1, (ny + 1) // 2)
        for col in (0, amp.shape[1] - 1) if nx % 2 == 0 else (0,):
            f[ny - half, col] = np.conj(f[half, col])
            for r in [0, ny // 2] if ny % 2 == 0 else [0]:
                f[r, col] = amp[r, col] * (1.0 if phi[r, col] < math.pi else -1.0)
        f[0, 0] = 0.0
        out.append(sfft.irfft2(f, s=x.shape) + np.float32(x32.mean(dtype=np.float64)))
    return out


def _z(value: float, sur: list[float]) -> float:
    a = np.asarray(sur)
    return (value - a.mean()) / a.std(ddof=1)


def test_surrogate_z_scores_match_plainly_built_surrogates(case):
    z, s, params = case
    if params["n_surrogates"] == 0:
        pytest.skip("no surrogates in this case")
    zl = level(z, DX, DX, None, "plane")
    seed = 20261201
    sur = _numpy_surrogates(zl, seed, N_SUR)
    pe = [ordpy.complexity_entropy(x, dx=2, dy=2) for x in sur]
    refs = {
        "permutation_entropy_2d": _z(s.score("permutation_entropy_2d").value, [p[0] for p in pe]),
        "js_complexity_2d": _z(s.score("js_complexity_2d").value, [p[1] for p in pe]),
    }
    # Symbol-field scores: the 256^2 field is its own central tile (seed + 7919).
    tile_sur = _numpy_surrogates(zl, seed + 7919, N_SUR)
    sym = [quantile_symbols(x.astype(np.float64), n_bins=4) for x in tile_sur]
    eds = [entropy_density_2d(x) for x in sym]
    codes = [two_part_code(x, alphabet_size=4) for x in sym]
    refs["entropy_density_2d_bits"] = _z(
        s.score("entropy_density_2d_bits").value, [e.entropy_density for e in eds]
    )
    refs["excess_entropy_2d_bits"] = _z(
        s.score("excess_entropy_2d_bits").value, [e.excess_entropy for e in eds]
    )
    refs["effective_complexity_2d_bits"] = _z(
        s.score("effective_complexity_2d_bits").value, [c.effective_complexity_bits for c in codes]
    )
    refs["total_information_2d_bits_per_site"] = _z(
        s.score("total_information_2d_bits_per_site").value,
        [c.total_information_bits_per_symbol for c in codes],
    )
    for name, ref in refs.items():
        got = s.score(name).surrogate_z
        assert got is not None, name
        assert abs(got - ref) <= 0.05 + 2e-3 * abs(ref), (name, got, ref)


@pytest.mark.parametrize("ties", ["random", "stable"])
@pytest.mark.parametrize("serial", [False, True])
def test_ordinal_counts_with_offset_equal_counts_of_the_shifted_field(ties, serial):
    # The surrogates' mean is added inside the counting pass: the counts must be
    # those of the float32 field with the mean added (x += mean), ties included.
    # A coarse field plus a large offset makes float32 rounding create new ties.
    from measures.terrain._fastfield import ordinal_counts

    rng = np.random.default_rng(5)
    x = (np.round(rng.standard_normal((120, 90)) * 50) / 7).astype(np.float32)
    for off in (np.float32(0.37), np.float32(3.1e6)):
        shifted = x + off
        ref = ordinal_counts(shifted, (2, 2), ties=ties, seed=3, serial=serial)
        got = ordinal_counts(x, (2, 2), ties=ties, seed=3, serial=serial, offset=off)
        np.testing.assert_array_equal(got[0], ref[0])
        assert got[1] == ref[1]
    assert ordinal_counts(x, (2, 2), offset=np.float32(3.1e6))[1] > ordinal_counts(x, (2, 2))[1]


@pytest.mark.parametrize("shape", [(64, 64), (61, 90), (90, 61)])
def test_compiled_acf_steps_equal_the_numpy_steps(shape):
    # The ACF's power spectrum and its full-grid normalisation are compiled
    # passes: they must give numpy's re*re + im*im and its three in-place
    # divisions bit for bit (flat grid: NaN).
    from measures.terrain._fastfield import acf_full_normalised, power_inplace

    rng = np.random.default_rng(shape[1])
    spec = (rng.standard_normal(shape) + 1j * rng.standard_normal(shape)).astype(np.complex64)
    ref = spec.real**2
    ref += spec.imag**2
    got = spec.copy()
    power_inplace(got)
    np.testing.assert_array_equal(got.real, ref)
    assert not got.imag.any()
    ny, nx = shape[0] - 7, (shape[1] - 3) // 2 * 2 - 1
    hy, hx = ny // 2, nx // 2
    num = rng.standard_normal((2 * hy + 1, shape[1])).astype(np.float32)
    cols = np.r_[shape[1] - hx : shape[1], 0 : hx + 1]
    ref = np.asarray(num[:, cols], dtype=np.float64)
    ref /= (ny - np.abs(np.arange(-hy, hy + 1))).astype(np.float64)[:, None]
    ref /= (nx - np.abs(np.arange(-hx, hx + 1))).astype(np.float64)[None, :]
    ref /= ref[hy, hx]
    np.testing.assert_array_equal(acf_full_normalised(num, cols, ny, nx), ref)
    num[hy, cols[hx]] = 0.0
    assert np.isnan(acf_full_normalised(num * 0, cols, ny, nx)).all()


def test_two_lanes_give_the_sequential_summary(monkeypatch):
    # The ordinal surrogates run on a background lane beside the other stages
    # (one numba thread each), and the symbol-field scores go to whichever lane
    # is free first. Scores, z-scores and notes must be those of the plain
    # one-stage-after-the-other run on one worker, bit for bit; only the
    # symbol-field z-scores may move, by float32 rounding, because their tile
    # surrogates' inverse FFT runs on 2 threads instead of 1.
    import measures.terrain.summary as summary

    z = _surface(192)
    lanes = terrain_summary(z, DX, params={"n_surrogates": 5})
    monkeypatch.setattr(summary, "_WORKERS", 1)
    plain = terrain_summary(z, DX, params={"n_surrogates": 5})
    assert lanes.notes == plain.notes
    assert [s.name for s in lanes.scores] == [s.name for s in plain.scores]
    for a, b in zip(lanes.scores, plain.scores, strict=True):
        assert a.value == b.value or (math.isnan(a.value) and math.isnan(b.value)), a.name
        if a.name.startswith(("permutation", "js_")) or a.surrogate_z is None:
            assert a.surrogate_z == b.surrogate_z, a.name
        else:
            assert abs(a.surrogate_z - b.surrogate_z) <= 1e-4 * (1 + abs(b.surrogate_z)), a.name
