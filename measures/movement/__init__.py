"""Movement: kinematics, the body frame, gait and the whole-trial summary."""

# Each module owns its public names through __all__; this file only gathers them.
from measures.movement import bodyframe as _bodyframe
from measures.movement import gait as _gait
from measures.movement import kinematics as _kinematics
from measures.movement import state as _state
from measures.movement import summary as _summary
from measures.movement.bodyframe import *  # noqa: F403
from measures.movement.gait import *  # noqa: F403
from measures.movement.kinematics import *  # noqa: F403
from measures.movement.state import *  # noqa: F403
from measures.movement.summary import *  # noqa: F403

__all__ = [
    name
    for module in (
        _bodyframe,
        _gait,
        _kinematics,
        _state,
        _summary,
    )
    for name in module.__all__
]
