"""Two-sample tests of equal next-symbol distributions (private, used by CSSR).

The splitting step of causal-state reconstruction asks, over and over, whether
two count vectors ``a`` and ``b`` (next-symbol counts after two histories) come
from one distribution. That is a test of homogeneity on the 2 x k table
``[a; b]`` (columns empty in both rows are dropped). Which test is used
depends on the counts:

* every expected count >= 5 (the usual rule of thumb for the chi-square
  approximation, common practice): the G-test (likelihood-ratio test) against
  the chi-square distribution with (k_eff - 1) degrees of freedom;
* otherwise, two columns: Fisher's exact test (scipy);
* otherwise, when at most ``_MAX_ENUMERATION`` tables share the observed
  margins: the exact conditional test by enumerating them (multivariate
  hypergeometric law; p = total probability of tables no more probable than
  the observed one), which is Fisher's test extended to 2 x k;
* otherwise the rarest columns are pooled into one (at least two of them, and
  until the pooled column has expected counts >= 5 or only two columns are
  left) and the rules above are applied to the smaller table. Pooling tests a consequence of
  the null hypothesis (equal distributions have equal pooled distributions),
  so the level is kept; only power is lost, on rare symbols.

All paths are deterministic (no Monte Carlo p-values, which could not reach
the small per-test levels CSSR needs, about 1e-5).
"""

from __future__ import annotations

import itertools
import math

import numpy as np
from numpy.typing import NDArray
from scipy import special, stats

_MIN_EXPECTED = 5.0
_MAX_ENUMERATION = 5_000
# Relative slack when comparing table probabilities, so that tables exactly as
# probable as the observed one count as "at least as extreme" despite round-off.
_PROB_SLACK = 1e-7


def homogeneity_pvalue(a: NDArray[np.int64], b: NDArray[np.int64]) -> float:
    """p-value of the hypothesis that count vectors ``a`` and ``b`` share a distribution."""
    keep = (a + b) > 0
    a = a[keep]
    b = b[keep]
    na, nb = int(a.sum()), int(b.sum())
    if a.size <= 1 or na == 0 or nb == 0:
        return 1.0
    col = a + b
    n = na + nb
    expected_a = na * col / n
    expected_b = nb * col / n
    if min(expected_a.min(), expected_b.min()) >= _MIN_EXPECTED:
        return _g_test(a, b, expected_a, expected_b)
    if a.size == 2:
        return float(stats.fisher_exact([[a[0], a[1]], [b[0], b[1]]]).pvalue)
    # The smaller row is the one enumerated; the other is fixed by the margins.
    small = a if na <= nb else b
    if math.comb(int(small.sum()) + small.size - 1, small.size - 1) <= _MAX_ENUMERATION:
        return _exact_enumeration(small, col)
    return _pooled(a, b)


def _pooled(a: NDArray[np.int64], b: NDArray[np.int64]) -> float:
    """Pool the rarest columns into one until its expected counts reach 5, then retest."""
    order = np.argsort(a + b, kind="stable")  # rarest first
    a, b = a[order], b[order]
    na, nb, n = a.sum(), b.sum(), a.sum() + b.sum()
    cut = 2  # pool at least two columns, so every retest has fewer columns
    while cut < a.size - 1 and min(na, nb) * (a[:cut] + b[:cut]).sum() / n < _MIN_EXPECTED:
        cut += 1
    return homogeneity_pvalue(np.append(a[:cut].sum(), a[cut:]), np.append(b[:cut].sum(), b[cut:]))


def _g_test(
    a: NDArray[np.int64], b: NDArray[np.int64], ea: NDArray[np.float64], eb: NDArray[np.float64]
) -> float:
    obs = np.concatenate([a, b]).astype(float)
    exp = np.concatenate([ea, eb])
    nz = obs > 0
    g = 2.0 * float(np.sum(obs[nz] * np.log(obs[nz] / exp[nz])))
    return float(stats.chi2.sf(g, a.size - 1))


def _log_table_prob(rows: NDArray[np.int64], cols: NDArray[np.int64]) -> NDArray[np.float64]:
    """log P(row | margins) under the multivariate hypergeometric law, per row of ``rows``."""
    n_small = rows.sum(axis=-1)
    total = cols.sum()
    log_binom = (
        special.gammaln(cols + 1) - special.gammaln(rows + 1) - special.gammaln(cols - rows + 1)
    )
    return log_binom.sum(axis=-1) - (
        special.gammaln(total + 1)
        - special.gammaln(n_small + 1)
        - special.gammaln(total - n_small + 1)
    )


def _compositions(n: int, parts: int) -> NDArray[np.int64]:
    """All vectors of ``parts`` non-negative integers summing to ``n`` (stars and bars)."""
    bars = np.array(list(itertools.combinations(range(n + parts - 1), parts - 1)), dtype=np.int64)
    bars = bars.reshape(-1, parts - 1)
    edges = np.hstack(
        [np.full((bars.shape[0], 1), -1), bars, np.full((bars.shape[0], 1), n + parts - 1)]
    )
    return np.diff(edges, axis=1) - 1


def _exact_enumeration(small: NDArray[np.int64], cols: NDArray[np.int64]) -> float:
    tables = _compositions(int(small.sum()), small.size)
    tables = tables[(tables <= cols).all(axis=1)]
    logp = _log_table_prob(tables, cols)
    observed = _log_table_prob(small[None, :], cols)[0]
    p = np.exp(logp)
    extreme = logp <= observed + math.log1p(_PROB_SLACK)
    return float(min(1.0, p[extreme].sum() / p.sum()))
