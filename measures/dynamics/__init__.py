"""Dynamics of a state: delay and singular-spectrum embedding, recurrence
quantification and its kernels.
"""

# Each module owns its public names through __all__; this file only gathers them.
from measures.dynamics import embedding as _embedding
from measures.dynamics import recurrence as _recurrence
from measures.dynamics.embedding import *  # noqa: F403
from measures.dynamics.recurrence import *  # noqa: F403

__all__ = [
    name
    for module in (
        _embedding,
        _recurrence,
    )
    for name in module.__all__
]
