"""Analysis recipes: the complete parameter set one scoring run uses.

A recipe holds every parameter, not only the ones a user changed: the stored JSON (and so
its hash) alone fixes the computation, whatever defaults a later release ships. Sections:
``movement`` (``measures.MOVEMENT_DEFAULTS``), ``terrain`` (``measures.TERRAIN_DEFAULTS``) and
``heightmap`` (keyword arguments of ``measures.points_to_heightmap``). Each section carries its
own seed, so there is no second, top-level seed to disagree with them.
"""

from __future__ import annotations

import copy
import json
from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # the storage layer is imported when a function runs
    from sqlalchemy.orm import Session

    from storage.models import Recipe

from measures.errors import InvalidParameterError

__all__ = [
    "DEFAULT_RECIPE",
    "LEGACY_NAMES",
    "SECTIONS",
    "complete_parameters",
    "current_parameters",
    "default_parameters",
    "ensure_default_recipe",
    "resolve_recipe",
]

DEFAULT_RECIPE = "default"
SECTIONS = ("movement", "terrain", "heightmap")
# A fixed grid spacing a recipe may choose for rasterised scans: 1 mm, five times the ~0.2 mm
# resolution of small-animal capture (common practice). The default recipe leaves
# ``heightmap.dx_m`` unset: the cell then comes from the cloud's own point spacing
# (measures.heightmap_dx_m), so a 30 m lidar tile and a 30 cm tray both get a sensible grid.
DEFAULT_DX_M = 0.001
_FUNCTION = "analysis recipe"

#: Parameter names of earlier releases -> today's name, by section (``None``: the parameter
#: was never read and is dropped). A stored recipe keeps its JSON, and so its hash, the key
#: its scores and jobs are stored under; its names are translated here, in this one place,
#: whenever a job or a view reads it (:func:`current_parameters`) and in the overrides a
#: client sends (:func:`complete_parameters`).
LEGACY_NAMES: dict[str, dict[str, str | None]] = {
    "heightmap": {"cell_m": "dx_m"},
    "movement": {
        "embedding_delay": "embedding_delay_samples",
        "ordinal_delay": "ordinal_delay_samples",
        "rqa_theiler": "rqa_theiler_samples",
        "ssa_window": None,  # never read: the state window is ssa_window_s
    },
}


def _jsonable(value: Mapping[str, Any]) -> dict[str, Any]:
    # Tuples become lists: the stored form is JSON, and the hash is taken on that form.
    # A JSON object round-trips to a dict.
    out: dict[str, Any] = json.loads(json.dumps(value, allow_nan=False))
    return out


def default_parameters() -> dict[str, Any]:
    """The complete default parameter set, as plain JSON."""
    # measures.defaults is plain data: the web process builds the default recipe without
    # importing the numerics (start-up time, issue figures in DEVELOPERS.md).
    from measures.defaults import HEIGHTMAP_DEFAULTS, MOVEMENT_DEFAULTS, TERRAIN_DEFAULTS

    return _jsonable(
        {
            "movement": MOVEMENT_DEFAULTS,
            "terrain": TERRAIN_DEFAULTS,
            "heightmap": HEIGHTMAP_DEFAULTS,
        }
    )


def _translate(section: str, params: Mapping[str, Any]) -> dict[str, Any]:
    old_names = LEGACY_NAMES.get(section, {})
    out: dict[str, Any] = {}
    for key, value in params.items():
        new = old_names.get(key, key)
        if new is not None and not (new != key and new in params):  # today's name wins
            out[new] = value
    return out


def current_parameters(parameters: Mapping[str, Any] | None) -> dict[str, Any]:
    """A stored recipe's parameters under today's names (:data:`LEGACY_NAMES`).

    The stored JSON and its hash are left as they are; only the copy returned is renamed.
    """
    out: dict[str, Any] = copy.deepcopy(dict(parameters or {}))
    for section, params in out.items():
        if isinstance(params, Mapping):
            out[section] = _translate(section, params)
    return out


def _check_value(section: str, key: str, value: Any, default: Any) -> None:
    # Light type check against the default; the measures check ranges when a job runs.
    if default is None or value is None:
        return
    number = (int, float)
    same = isinstance(value, bool) == isinstance(default, bool) and (
        (isinstance(default, number) and isinstance(value, number))
        or isinstance(value, type(default))
    )
    if not same:
        raise InvalidParameterError(
            f"{section}.{key}", _FUNCTION, f"a {type(default).__name__} like {default!r}", value
        )


def complete_parameters(given: Mapping[str, Any] | None) -> dict[str, Any]:
    """Merge ``given`` (sections of overrides) onto the defaults; reject unknown names.

    Names of earlier releases (:data:`LEGACY_NAMES`) are accepted and stored under
    today's names. Raises ``InvalidParameterError`` naming the section and key.
    """
    out = default_parameters()
    for section, overrides in current_parameters(given).items():
        if section not in SECTIONS:
            raise InvalidParameterError(
                "parameters", _FUNCTION, f"sections among {SECTIONS}", section
            )
        if not isinstance(overrides, Mapping):
            raise InvalidParameterError(
                section, _FUNCTION, "a JSON object of parameters", overrides
            )
        for key, value in overrides.items():
            if key not in out[section]:
                raise InvalidParameterError(
                    f"{section}.{key}", _FUNCTION, f"keys among {sorted(out[section])}", key
                )
            _check_value(section, key, value, out[section][key])
            out[section][key] = copy.deepcopy(value)
    try:
        return _jsonable(out)
    except (TypeError, ValueError) as exc:
        raise InvalidParameterError(
            "parameters", _FUNCTION, "plain finite JSON", str(exc)
        ) from None


def ensure_default_recipe(session: Session) -> Recipe:
    """Create recipe ``default`` v1 from the current defaults when no ``default`` exists."""
    from storage import repo
    from storage.errors import NotFound

    try:
        return repo.get_recipe(session=session, name=DEFAULT_RECIPE)
    except NotFound:
        recipe, _ = repo.create_recipe(
            session=session, name=DEFAULT_RECIPE, parameters=default_parameters()
        )
        return recipe


def resolve_recipe(session: Session, recipe_hash: str | None) -> Recipe:
    """The recipe a job runs under: by hash, or the latest ``default`` when it names none."""
    from storage import repo

    if recipe_hash is None:
        return ensure_default_recipe(session)
    return repo.get_recipe_by_hash(session=session, recipe_hash=recipe_hash)
