"""gaitscape's numerical core: pure functions on numpy arrays, by family.

``measures.information`` is the shared core that both sides call;
``measures.dynamics`` embeds and quantifies recurrence; ``measures.movement``
and ``measures.terrain`` build their summaries from those two;
``measures.correspondence`` relates the two sides across arenas. Imports run
one way: correspondence -> movement, terrain -> dynamics, information.

Every public name of every family is re-exported here (``from measures import
rqa`` works). Families load lazily on first use, so importing
``measures.errors`` (as the web process does) does not load numba or scipy.
"""

from __future__ import annotations

import importlib
from typing import Any

from measures._types import *  # noqa: F403
from measures.defaults import *  # noqa: F403  (plain data, no numerics)
from measures.errors import *  # noqa: F403

__version__ = "0.2.0"

# The order in which a name is looked up; each family's __init__ gathers the
# ``__all__`` of its modules, so a new public name needs no edit here.
FAMILIES = ("information", "dynamics", "movement", "terrain", "correspondence")


def __getattr__(name: str) -> Any:
    if name.startswith("__"):
        raise AttributeError(name)
    for family in FAMILIES:
        module = importlib.import_module(f"measures.{family}")
        if name in module.__all__:
            value = getattr(module, name)
            globals()[name] = value
            return value
    raise AttributeError(f"module 'measures' has no attribute {name!r}")


def __dir__() -> list[str]:
    names = set(globals())
    for family in FAMILIES:
        names.update(getattr(importlib.import_module(f"measures.{family}"), "__all__", ()))
    return sorted(names)
