"""Project-wide numerical assertion with documented default tolerances.

Defaults: ``rtol=1e-7`` (float64 arithmetic with a few hundred operations
of round-off) and ``atol=0``. Pass an explicit ``atol`` when the expected
value is near zero, and write the reason beside any looser tolerance.
"""

from __future__ import annotations

from typing import Any

import numpy as np

DEFAULT_RTOL = 1e-7
DEFAULT_ATOL = 0.0


def assert_allclose(
    actual: Any,
    desired: Any,
    *,
    rtol: float = DEFAULT_RTOL,
    atol: float = DEFAULT_ATOL,
    err_msg: str = "",
) -> None:
    """Assert ``actual`` equals ``desired`` within ``rtol``/``atol`` (numpy semantics)."""
    np.testing.assert_allclose(actual, desired, rtol=rtol, atol=atol, err_msg=err_msg)
