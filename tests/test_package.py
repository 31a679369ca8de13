"""Package-level checks: the public contract names exist and measures/ stays pure."""

from __future__ import annotations

import subprocess
import sys

import measures

# Names the design card marks "contract" (outside checks import them).
CONTRACT = (
    "rqa",
    "causal_states",
    "entropy_rate",
    "complexity_entropy",
    "areal_parameters",
    "hurst_exponent",
)


def test_contract_names_are_exported() -> None:
    missing = [name for name in CONTRACT if not callable(getattr(measures, name, None))]
    assert missing == []


def test_every_module_all_resolves() -> None:
    import importlib
    import pkgutil

    for info in pkgutil.walk_packages(measures.__path__, prefix="measures."):
        module = importlib.import_module(info.name)
        for name in getattr(module, "__all__", []):
            assert hasattr(module, name), f"{info.name}.__all__ lists missing {name!r}"
            # and the top level finds it (the contract: ``from measures import NAME``)
            if not info.name.rsplit(".", 1)[-1].startswith("_"):
                assert getattr(measures, name) is getattr(module, name), (info.name, name)


# Imports run one way: correspondence -> movement, terrain -> dynamics -> information.
RANK = {"information": 0, "dynamics": 1, "movement": 2, "terrain": 2, "correspondence": 3}


def test_measure_families_import_one_way() -> None:
    import ast
    from pathlib import Path

    root = Path(measures.__file__).parent
    bad = []
    for family, rank in RANK.items():
        for path in (root / family).glob("*.py"):
            for node in ast.walk(ast.parse(path.read_text())):
                if isinstance(node, ast.ImportFrom) and node.module:
                    names = [node.module]
                elif isinstance(node, ast.Import):
                    names = [a.name for a in node.names]
                else:
                    continue
                for name in names:
                    parts = name.split(".")
                    if parts[0] != "measures" or len(parts) < 2 or parts[1] not in RANK:
                        continue
                    other = parts[1]
                    if other != family and RANK[other] >= rank:
                        bad.append(f"{path.name} ({family}) imports {name}")
    assert bad == []


def test_errors_import_without_numerics() -> None:
    # The web process maps these errors to HTTP answers; loading them must not pull in
    # numba or scipy (start-up time of the server).
    code = (
        "import sys, measures.errors, measures; measures.InvalidParameterError; "
        "print(','.join(m for m in ('numba', 'scipy', 'open3d') if m in sys.modules))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


def test_importing_measures_loads_no_service_storage_or_open3d() -> None:
    # open3d is heavy and only needed for point clouds; it is imported lazily.
    code = (
        "import sys, measures; dir(measures); "  # dir() loads every family
        "bad = [m for m in ('service', 'storage', 'sqlalchemy', 'fastapi', 'open3d') "
        "if m in sys.modules]; print(','.join(bad))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""
