"""measures.defaults: plain data that matches the functions it configures."""

from __future__ import annotations

import inspect
import json
import subprocess
import sys

from measures import points_to_heightmap
from measures.defaults import HEIGHTMAP_DEFAULTS, MOVEMENT_DEFAULTS, TERRAIN_DEFAULTS


def test_heightmap_defaults_are_the_keyword_defaults() -> None:
    params = inspect.signature(points_to_heightmap).parameters
    keyword = {n: p.default for n, p in params.items() if p.kind is p.KEYWORD_ONLY}
    assert keyword == HEIGHTMAP_DEFAULTS


def test_summaries_use_these_dicts() -> None:
    # The summaries merge caller parameters onto these very objects (an unknown key is
    # refused), and recipes store them as JSON.
    import measures

    assert measures.MOVEMENT_DEFAULTS is MOVEMENT_DEFAULTS
    assert measures.TERRAIN_DEFAULTS is TERRAIN_DEFAULTS
    for defaults in (MOVEMENT_DEFAULTS, TERRAIN_DEFAULTS, HEIGHTMAP_DEFAULTS):
        # Plain JSON: keys and values survive a round trip (tuples come back as lists).
        back = json.loads(json.dumps(defaults, allow_nan=False))
        assert back.keys() == defaults.keys()
        assert all(back[k] == (list(v) if isinstance(v, tuple) else v) for k, v in defaults.items())


def test_defaults_import_no_numerics() -> None:
    code = (
        "import sys, measures.defaults; "
        "print(','.join(m for m in ('numba', 'scipy', 'open3d') if m in sys.modules))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""
