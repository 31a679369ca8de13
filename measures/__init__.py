"""gaitscape's numerical core: pure functions on numpy arrays.

Every public name of every measure family is re-exported here, so
``from measures import rqa`` works. Each module defines ``__all__``; this
file only gathers them (one module per family, see DEVELOPERS.md).
"""

# Star imports are deliberate here: each family module owns its public names
# through ``__all__`` and this file must not need editing when one is added.
from measures._types import *  # noqa: F403
from measures._validation import *  # noqa: F403
from measures.areal import *  # noqa: F403
from measures.bodyframe import *  # noqa: F403
from measures.causal import *  # noqa: F403
from measures.correspondence import *  # noqa: F403
from measures.correspondence_local import *  # noqa: F403
from measures.correspondence_multi import *  # noqa: F403
from measures.description import *  # noqa: F403
from measures.embedding import *  # noqa: F403
from measures.entropy import *  # noqa: F403
from measures.fractal import *  # noqa: F403
from measures.gait import *  # noqa: F403
from measures.kinematics import *  # noqa: F403
from measures.movement import *  # noqa: F403
from measures.mutual_info import *  # noqa: F403
from measures.ordinal import *  # noqa: F403
from measures.pointcloud import *  # noqa: F403
from measures.recurrence import *  # noqa: F403
from measures.registration import *  # noqa: F403
from measures.sampen import *  # noqa: F403
from measures.spectra import *  # noqa: F403
from measures.surrogates import *  # noqa: F403
from measures.symbolic import *  # noqa: F403
from measures.terrain import *  # noqa: F403

__version__ = "0.1.0"
