"""The errors every measure raises, in a module that imports nothing heavy.

The web process maps these to HTTP 4xx answers; importing them must not load
numba or scipy (``measures/__init__`` loads families lazily for the same
reason).
"""

from __future__ import annotations

from typing import Any

import numpy as np

__all__ = ["InsufficientDataError", "InvalidParameterError"]


def summarise(value: Any) -> str:
    if isinstance(value, np.ndarray):
        return f"an array of shape {value.shape} and dtype {value.dtype}"
    text = repr(value)
    return text if len(text) <= 80 else text[:77] + "..."


class InvalidParameterError(ValueError):
    """A parameter or input array is outside what a measure accepts.

    Parameters
    ----------
    parameter : str
        Name of the offending parameter.
    function : str
        Public function that rejected it.
    allowed : str
        Human description of the allowed values.
    given : object
        What the caller passed (summarised for arrays).
    """

    def __init__(self, parameter: str, function: str, allowed: str, given: Any) -> None:
        self.parameter = parameter
        self.function = function
        self.allowed = allowed
        self.given = given
        super().__init__(
            f"The {parameter!r} parameter of {function} must be {allowed}. Got {summarise(given)}."
        )

    def __reduce__(self) -> tuple[Any, ...]:
        # Jobs run in other processes: the error must survive pickling with its
        # message (the default reduce calls __init__ with the message alone).
        return (type(self), (self.parameter, self.function, self.allowed, self.given))


class InsufficientDataError(InvalidParameterError):
    """The input is well-formed but too short or too sparse for the estimate."""
