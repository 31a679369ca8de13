"""The shared information-theoretic core, called by the movement and terrain
families alike on 1D sequences and 2D fields: symbols, ordinal patterns,
block entropies and rates, LZ76, causal states, the two-part code, sample
entropy, mutual information and surrogates.
"""

# Each module owns its public names through __all__; this file only gathers them.
from measures.information import causal as _causal
from measures.information import entropy as _entropy
from measures.information import mutual_info as _mutual_info
from measures.information import ordinal as _ordinal
from measures.information import sampen as _sampen
from measures.information import surrogates as _surrogates
from measures.information import symbolic as _symbolic
from measures.information import two_part as _two_part
from measures.information.causal import *  # noqa: F403
from measures.information.entropy import *  # noqa: F403
from measures.information.mutual_info import *  # noqa: F403
from measures.information.ordinal import *  # noqa: F403
from measures.information.sampen import *  # noqa: F403
from measures.information.surrogates import *  # noqa: F403
from measures.information.symbolic import *  # noqa: F403
from measures.information.two_part import *  # noqa: F403

__all__ = [
    name
    for module in (
        _causal,
        _entropy,
        _mutual_info,
        _ordinal,
        _sampen,
        _surrogates,
        _symbolic,
        _two_part,
    )
    for name in module.__all__
]
