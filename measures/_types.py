"""Small result types shared across measure families."""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["Score"]


@dataclass(frozen=True)
class Score:
    """One named number ready to be stored as a score row.

    Attributes
    ----------
    name : str
        Measure name, snake_case, unit suffix where helpful (``stride_length_m``).
    value : float
        The value (NaN when undefined, never silently 0).
    unit : str
        SI unit or ``"bits"``, ``"bits/symbol"``, ``"1"`` for dimensionless.
    ci_low, ci_high : float or None
        Optional confidence interval.
    surrogate_z : float or None
        Optional z-score against surrogates.
    note : str
        Why the value is NaN, or what was chosen automatically ("" when
        nothing needs saying). Every NaN value carries one.
    """

    name: str
    value: float
    unit: str
    ci_low: float | None = None
    ci_high: float | None = None
    surrogate_z: float | None = None
    note: str = ""
