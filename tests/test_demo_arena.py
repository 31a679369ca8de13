"""The demo walker's fast paths against the plain numpy computations they replace.

The demo data are invented; what is checked here is that the shortcuts give what numpy
gives the slow way (``np.std`` of each patch, one ``Generator`` call per draw).
"""

from __future__ import annotations

import numpy as np

from demo_arena.walker import _Draws, _local_roughness, _roughness_map


def test_roughness_map_is_the_std_of_each_clipped_patch() -> None:
    rng = np.random.default_rng(7)
    z = 0.35 + rng.normal(0, 1e-3, (60, 90)).cumsum(axis=1) * 0.1  # far from zero mean
    dx = 1e-3
    rough = _roughness_map(z, dx)
    cells = [(0, 0), (59, 89), (0, 45), (30, 0), (5, 3), (30, 45), (58, 1)]
    cells += [tuple(c) for c in rng.integers(0, (60, 90), size=(40, 2))]
    for i, j in cells:
        # The walker's own per-frame value at a point inside cell (i, j).
        expected = _local_roughness(z, dx, (j + 0.5) * dx, (i + 0.5) * dx)
        assert np.isclose(rough[i, j], expected, rtol=1e-9, atol=1e-15), (i, j)


def test_buffered_draws_are_the_generator_stream_and_leave_it_where_single_calls_do() -> None:
    one, buffered = np.random.default_rng(11), np.random.default_rng(11)
    draws = _Draws(buffered, block=16)  # small blocks: several refills
    sizes = [4, 1, 2, 4, 4, 1, 2, 2, 4, 1] * 5
    got = [v for k in sizes for v in draws.take(k)]
    expected = [v for k in sizes for v in one.normal(size=k)]
    assert got == expected
    draws.settle()
    assert buffered.random() == one.random()
