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

    for info in pkgutil.iter_modules(measures.__path__):
        module = importlib.import_module(f"measures.{info.name}")
        for name in getattr(module, "__all__", []):
            assert hasattr(module, name), f"measures.{info.name}.__all__ lists missing {name!r}"


def test_importing_measures_loads_no_service_storage_or_open3d() -> None:
    # open3d is heavy and only needed for point clouds; it is imported lazily.
    code = (
        "import sys, measures; "
        "bad = [m for m in ('service', 'storage', 'sqlalchemy', 'fastapi', 'open3d') "
        "if m in sys.modules]; print(','.join(bad))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""
