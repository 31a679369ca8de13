"""Parameter and input validation shared by every measure.

One error type, one message template (after scikit-learn's
``InvalidParameterError``): the message names the parameter, the function,
what is allowed and what was given.
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

from measures.errors import InsufficientDataError, InvalidParameterError

__all__ = ["InsufficientDataError", "InvalidParameterError"]


def check_choice(name: str, value: Any, function: str, choices: Iterable[Any]) -> Any:
    """Return ``value`` if it is one of ``choices``, else raise."""
    options = tuple(choices)
    if value not in options:
        raise InvalidParameterError(name, function, f"one of {options!r}", value)
    return value


def check_positive_int(name: str, value: Any, function: str, *, minimum: int = 1) -> int:
    """Return ``value`` as int if it is an integer >= ``minimum``, else raise."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < minimum:
        raise InvalidParameterError(name, function, f"an integer >= {minimum}", value)
    return int(value)


def check_positive_float(
    name: str, value: Any, function: str, *, allow_zero: bool = False
) -> float:
    """Return ``value`` as float if it is finite and > 0 (or >= 0), else raise."""
    try:
        out = float(value)
    except (TypeError, ValueError):
        raise InvalidParameterError(name, function, "a finite real number", value) from None
    if not np.isfinite(out) or out < 0 or (out == 0 and not allow_zero):
        bound = ">= 0" if allow_zero else "> 0"
        raise InvalidParameterError(name, function, f"a finite real number {bound}", value)
    return out


def as_float_array(
    name: str,
    value: ArrayLike,
    function: str,
    *,
    ndim: int | tuple[int, ...] | None = None,
    min_length: int = 1,
    allow_nan: bool = False,
) -> NDArray[np.float64]:
    """Convert ``value`` to a float64 array and check its shape and values.

    Parameters
    ----------
    name, function : str
        Used in the error message.
    ndim : int or tuple of int, optional
        Allowed numbers of dimensions.
    min_length : int
        Minimum size of the first axis.
    allow_nan : bool
        Whether NaN is accepted (Inf never is).
    """
    try:
        arr = np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError):
        raise InvalidParameterError(name, function, "an array of real numbers", value) from None
    if ndim is not None:
        dims = (ndim,) if isinstance(ndim, int) else ndim
        if arr.ndim not in dims:
            raise InvalidParameterError(name, function, f"an array with ndim in {dims}", arr)
    if arr.ndim == 0 or arr.shape[0] < min_length:
        raise InsufficientDataError(
            name, function, f"an array with at least {min_length} rows", arr
        )
    bad = np.isinf(arr) if allow_nan else ~np.isfinite(arr)
    if bad.any():
        what = "finite or NaN values" if allow_nan else "finite values (no NaN or Inf)"
        raise InvalidParameterError(name, function, f"an array of {what}", arr)
    return arr
