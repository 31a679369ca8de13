"""Terrain: point clouds, registration, areal parameters, spectra, fractal
estimators and the scan summary.
"""

# Each module owns its public names through __all__; this file only gathers them.
from measures.terrain import areal as _areal
from measures.terrain import fractal as _fractal
from measures.terrain import gridding as _gridding
from measures.terrain import pointcloud as _pointcloud
from measures.terrain import registration as _registration
from measures.terrain import spectra as _spectra
from measures.terrain import summary as _summary
from measures.terrain.areal import *  # noqa: F403
from measures.terrain.fractal import *  # noqa: F403
from measures.terrain.gridding import *  # noqa: F403
from measures.terrain.pointcloud import *  # noqa: F403
from measures.terrain.registration import *  # noqa: F403
from measures.terrain.spectra import *  # noqa: F403
from measures.terrain.summary import *  # noqa: F403

__all__ = [
    name
    for module in (
        _areal,
        _fractal,
        _gridding,
        _pointcloud,
        _registration,
        _spectra,
        _summary,
    )
    for name in module.__all__
]
