"""Correspondence between terrain and movement across arenas: arena-level
inference, design checks, covariate adjustment, local windows and
multivariate summaries.
"""

# Each module owns its public names through __all__; this file only gathers them.
from measures.correspondence import arena as _arena
from measures.correspondence import inference as _inference
from measures.correspondence import local as _local
from measures.correspondence import multivariate as _multivariate
from measures.correspondence import predict as _predict
from measures.correspondence.arena import *  # noqa: F403
from measures.correspondence.inference import *  # noqa: F403
from measures.correspondence.local import *  # noqa: F403
from measures.correspondence.multivariate import *  # noqa: F403
from measures.correspondence.predict import *  # noqa: F403

__all__ = [
    name
    for module in (
        _arena,
        _inference,
        _local,
        _multivariate,
        _predict,
    )
    for name in module.__all__
]
