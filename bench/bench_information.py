"""Benchmarks of the shared information-theoretic estimators.

Run ``python bench/bench_information.py [--quick] [section ...]``; with no
section every section runs; ``--quick`` uses smaller inputs and fewer repeats
(for a loaded machine or CI). Each section prints the median of a few repeats of our function
and, where a general-purpose library does the same job, its median and the
ratio (reference / ours, > 1 means we are faster). Machines are shared and
noisy: read the ratios, not the digits.

Sections are plain functions registered in ``SECTIONS``; add new ones at the
bottom (one function per family of estimators).
"""

from __future__ import annotations

import sys
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # measures from the checkout


def _median_seconds(fn: Callable[[], object], repeats: int = 5) -> float:
    fn()  # warm-up (JIT compilation, caches)
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return float(np.median(times))


def _report(label: str, ours: float, reference: float | None = None, ref_name: str = "") -> None:
    line = f"  {label:<50s} ours {ours * 1e3:9.1f} ms"
    if reference is not None:
        line += f" | {ref_name} {reference * 1e3:9.1f} ms | ratio {reference / ours:6.2f}"
    print(line)


# ---------------------------------------------------------------- symbolic / entropy / ordinal


def bench_symbolic_entropy_ordinal() -> None:
    """Ordinal patterns, block entropies, LZ76 and 2D entropy density."""
    import antropy
    import ordpy

    from measures import (
        block_entropies,
        complexity_entropy,
        entropy_density_2d,
        lz76_complexity,
        quantile_symbols,
        two_part_code,
    )

    rng = np.random.default_rng(0)
    n = 20_000 if QUICK else 90_000
    side = 512 if QUICK else 2048
    series = rng.normal(size=n)
    field = rng.normal(size=(side, side))
    coin = rng.integers(0, 2, size=n)
    print(f"symbolic / entropy / ordinal (series {n}, field {side}^2)")

    ours = _median_seconds(lambda: complexity_entropy(series, order=5))
    ref = _median_seconds(lambda: ordpy.complexity_entropy(series, dx=5))
    _report(f"complexity_entropy, {n} series, D=5", ours, ref, "ordpy")
    quantised = np.round(series * 4) / 4
    ours = _median_seconds(lambda: complexity_entropy(quantised, order=5, ties="random"))
    ref = _median_seconds(lambda: complexity_entropy(quantised, order=5))
    _report(f"complexity_entropy, {n} quantised, ties random", ours, ref, "stable")

    small = field[: side // 4, : side // 4] if QUICK else field[:512, :512]
    ours = _median_seconds(lambda: complexity_entropy(small, order=(2, 2)))
    ref = _median_seconds(lambda: ordpy.complexity_entropy(small, dx=2, dy=2), repeats=3)
    _report(f"complexity_entropy, {small.shape} field, 2x2", ours, ref, "ordpy")

    ours = _median_seconds(lambda: complexity_entropy(field, order=(2, 2)), repeats=3)
    _report(f"complexity_entropy, {side}x{side} field, 2x2", ours)

    ours = _median_seconds(lambda: block_entropies(coin))
    _report(f"block_entropies, {n} binary, default L", ours)

    binned = quantile_symbols(field, n_bins=2)
    ours = _median_seconds(lambda: entropy_density_2d(binned), repeats=3)
    _report(f"entropy_density_2d, {side}x{side} binary, default M", ours)

    ours = _median_seconds(lambda: lz76_complexity(coin), repeats=3)
    ref = _median_seconds(lambda: antropy.lziv_complexity(coin), repeats=3)
    _report(f"lz76_complexity, {n} binary", ours, ref, "antropy")

    ours = _median_seconds(lambda: two_part_code(coin), repeats=3)
    ref = _median_seconds(lambda: block_entropies(coin), repeats=3)
    _report(f"two_part_code, {n} binary, default windows", ours, ref, "block_entropies")
    ours = _median_seconds(lambda: two_part_code(binned), repeats=3)
    _report(f"two_part_code, {side}x{side} binary field, 64x64 tiles", ours)


# ---------------------------------------------------------------- causal, sampen, MI, surrogates


def _golden_mean(n: int, seed: int = 0) -> np.ndarray:
    # Golden-mean process (no "00"): after a 0 always 1; after a 1 a fair coin.
    u = np.random.default_rng(seed).random(n)
    out = np.empty(n, dtype=np.int64)
    prev = 1
    for i in range(n):
        prev = 1 if prev == 0 else int(u[i] < 0.5)
        out[i] = prev
    return out


def bench_causal_sampen_mi_surrogates() -> None:
    """CSSR, two-part code, sample/multiscale entropy, KSG MI and surrogates."""
    import antropy
    from sklearn.feature_selection import mutual_info_regression

    from measures import (
        causal_states,
        iaaft_surrogate,
        ksg_mutual_information,
        multiscale_entropy,
        phase_surrogate,
        sample_entropy,
        two_part_code,
    )

    rng = np.random.default_rng(0)
    n = 20_000 if QUICK else 90_000
    golden = _golden_mean(n)
    series = rng.normal(size=n)
    short = series[:20_000]
    print("causal / description / sampen / mutual information / surrogates")

    ours = _median_seconds(lambda: causal_states(golden, max_history=6), repeats=3)
    _report(f"causal_states, {n} golden mean, L=6", ours)
    ours = _median_seconds(lambda: causal_states(golden), repeats=3)
    _report(f"causal_states, {n} golden mean, default L", ours)
    ours = _median_seconds(lambda: two_part_code(golden), repeats=3)
    _report(f"two_part_code, {n} golden mean, default windows", ours)

    ours = _median_seconds(lambda: sample_entropy(short), repeats=3)
    ref = _median_seconds(lambda: antropy.sample_entropy(short), repeats=3)
    _report("sample_entropy, 20k, m=2", ours, ref, "antropy")
    ours = _median_seconds(lambda: sample_entropy(series), repeats=3)
    _report(f"sample_entropy, {n}, m=2", ours)
    ours = _median_seconds(lambda: multiscale_entropy(series), repeats=3)
    _report(f"multiscale_entropy, {n}, scales 1..20", ours)

    x = series[:20_000]
    y = x + rng.normal(size=x.size)
    ours = _median_seconds(lambda: ksg_mutual_information(x, y), repeats=3)
    ref = _median_seconds(
        lambda: mutual_info_regression(x[:, None], y, n_neighbors=3, random_state=0), repeats=3
    )
    _report("ksg_mutual_information, 20k, k=3", ours, ref, "scikit-learn")

    ours = _median_seconds(lambda: iaaft_surrogate(series[:4096] ** 3, seed=1), repeats=3)
    _report("iaaft_surrogate, 4096 samples, defaults (<=200 it.)", ours)
    fside = 128 if QUICK else 256
    field = rng.normal(size=(fside, fside)) ** 2
    ours = _median_seconds(lambda: iaaft_surrogate(field, seed=1), repeats=3)
    _report(f"iaaft_surrogate, {fside}x{fside} field, defaults (<=200 it.)", ours)
    bside = 512 if QUICK else 1024
    big = rng.normal(size=(bside, bside))
    ours = _median_seconds(lambda: phase_surrogate(big, seed=1), repeats=3)
    _report(f"phase_surrogate, {bside}x{bside} field", ours)


# ---------------------------------------------------------------- LZ76


def bench_lz76() -> None:
    """LZ76 by suffix array against the quadratic Kaspar-Schuster loop and antropy."""
    import antropy

    from measures import lz76_complexity
    from measures.information.entropy import _lz76_phrases_quadratic, dense_symbols

    rng = np.random.default_rng(0)
    print("lz76 (ratio = reference / ours)")
    sizes = (90_000,) if QUICK else (90_000, 300_000)
    repeats = 1 if QUICK else 3
    for n in sizes:
        for label, seq in (
            ("random binary", rng.integers(0, 2, n)),
            ("random 6 symbols", rng.integers(0, 6, n)),
        ):
            dense = dense_symbols(seq, "bench", ndim=1)[0]
            ours = _median_seconds(lambda s=seq: lz76_complexity(s), repeats=3)
            quad = _median_seconds(lambda d=dense: _lz76_phrases_quadratic(d), repeats=repeats)
            _report(f"lz76_complexity, {n} {label}", ours, quad, "quadratic")
            if label == "random binary":
                ref = _median_seconds(lambda s=seq: antropy.lziv_complexity(s), repeats=repeats)
                _report(f"lz76_complexity, {n} {label}", ours, ref, "antropy")
    big = rng.integers(0, 2, 1_000_000)
    ours = _median_seconds(lambda: lz76_complexity(big), repeats=3)
    _report("lz76_complexity, 10^6 random binary (target <= 1 s)", ours)
    periodic = np.tile(rng.integers(0, 2, 100), 10_000)
    ours = _median_seconds(lambda: lz76_complexity(periodic), repeats=3)
    _report("lz76_complexity, 10^6 period-100", ours)


# ---------------------------------------------------------------- surrogates


def bench_surrogates() -> None:
    """2D phase surrogates: batched (one inverse FFT each) vs three FFTs each; IAAFT."""
    from measures import complexity_entropy, surrogate_test, surrogate_zscore

    rng = np.random.default_rng(0)
    side = 1024 if QUICK else 4096
    n_sur = 5 if QUICK else 19
    field = rng.standard_normal((side, side))
    print(f"surrogates ({side} x {side} field, {n_sur} phase surrogates)")

    def three_ffts() -> None:
        # The former route: phases from the FFT of a white-noise field, the
        # data transformed again for every surrogate.
        g = np.random.default_rng(1)
        for _ in range(n_sur):
            noise = np.fft.rfft2(g.standard_normal(field.shape))
            phases = noise / np.abs(noise)
            np.fft.irfft2(np.fft.rfft2(field) * phases, s=field.shape)

    ours = _median_seconds(
        lambda: surrogate_test(lambda a: 0.0, field, kind="phase", n_surrogates=n_sur), repeats=3
    )
    ref = _median_seconds(three_ffts, repeats=3)
    _report("phase surrogates, statistic = 0", ours, ref, "3 FFTs each")
    floor = _median_seconds(
        lambda: [np.fft.irfft2(np.fft.rfft2(field)) for _ in range(n_sur)], repeats=3
    )
    _report("phase surrogates, statistic = 0", ours, floor, "numpy rfft2+irfft2 each")
    small = field[:512, :512]
    ours = _median_seconds(
        lambda: surrogate_zscore(
            lambda a: complexity_entropy(a, order=(2, 2), ties="random")[0],
            small,
            n_surrogates=n_sur,
            method="phase",
        ),
        repeats=3,
    )
    _report("surrogate_zscore PE 2x2, 512x512, phase", ours)
    trial = np.cumsum(rng.standard_normal((9000 if QUICK else 90_000, 7)), axis=0)
    for cap in (20, None):
        ours = _median_seconds(
            lambda c=cap: surrogate_zscore(
                lambda a: float(np.std(np.diff(a[:, 0]))),
                trial,
                n_surrogates=n_sur,
                method="iaaft",
                multichannel=True,
                max_iter=c,
            ),
            repeats=1,
        )
        label = "default (<=200)" if cap is None else f"<={cap}"
        _report(f"zscore mc IAAFT {trial.shape}, {n_sur} sur., it. {label}", ours)


SECTIONS: dict[str, Callable[[], None]] = {
    "symbolic": bench_symbolic_entropy_ordinal,
    "causal": bench_causal_sampen_mi_surrogates,
    "lz76": bench_lz76,
    "surrogates": bench_surrogates,
}

QUICK = False


def main(argv: list[str] | None = None) -> None:
    """Run the named sections (all when none are given); ``--quick`` for small inputs."""
    global QUICK
    args = sys.argv[1:] if argv is None else list(argv)
    QUICK = "--quick" in args
    names = [a for a in args if a != "--quick"] or list(SECTIONS)
    for name in names:
        if name not in SECTIONS:
            raise SystemExit(f"unknown section {name!r}; choose from {sorted(SECTIONS)}")
        SECTIONS[name]()


if __name__ == "__main__":
    main()
