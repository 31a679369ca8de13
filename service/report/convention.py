"""One place for what the report and the dashboard must agree on.

Both views of a correspondence take from here: the statistic coloured in the grid, the
permutation and bootstrap counts, the scan policy, the order of rows and columns, the diverging
palette and the sentence that states its sign, and how a value in SI base units is shown with
an SI prefix (um, mm, Hz, bits). ``service.report.view.correspondence_view`` turns a stored
correspondence into the numbers both draw; neither view computes statistics of its own.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from typing import Any

# The report is one self-contained page: its figures are data URIs, its style inline.
REPORT_CSP = (
    "default-src 'none'; img-src data:; style-src 'unsafe-inline'; base-uri 'none'; "
    "form-action 'none'; frame-ancestors 'none'"
)


__all__ = [
    "DIVERGING",
    "EFFECT_FIELD",
    "EFFECT_LABEL",
    "HEATMAP_MOVEMENT",
    "HEATMAP_TERRAIN",
    "N_BOOT",
    "N_PERMUTATIONS",
    "PALETTE_SIGN",
    "SCAN_POLICY",
    "SEED",
    "display_unit",
    "fmt_number",
    "measure_order",
    "recipe_label",
    "si_scale",
    "slope_unit",
]

# Arena permutations and hierarchical-bootstrap replicates for every view. With 7 arenas the
# exact test (7! = 5,040 orderings) is used whenever N_PERMUTATIONS exceeds it, so both views
# report the same p and q.
N_PERMUTATIONS = 9999
N_BOOT = 1999
SEED = 0
# Several scans of one arena: the latest scored one (the correspondence's documented default).
SCAN_POLICY = "latest"

# The grid colours Spearman's rho of the arena means: bounded, so the colour scale is fixed
# (-1 to 1) in both views and comparable between studies.
EFFECT_FIELD = "spearman_rho"
EFFECT_LABEL = "Spearman rho of arena means"
# ColorBrewer PuOr (Harrower & Brewer 2003, marked colour-blind safe), from -1 to +1:
# orange-brown for negative, purple for positive. Both views use these stops.
DIVERGING: tuple[tuple[float, str], ...] = (
    (0.0, "#7f3b08"),
    (0.125, "#b35806"),
    (0.25, "#e08214"),
    (0.375, "#fdb863"),
    (0.5, "#f7f7f7"),
    (0.625, "#b2abd2"),
    (0.75, "#8073ac"),
    (0.875, "#542788"),
    (1.0, "#2d004b"),
)
PALETTE_SIGN = (
    "purple = positive (the movement measure rises with the terrain measure), "
    "orange = negative, white = none; * = q < 0.05"
)

# Rows (terrain) and columns (movement) in this order, top to bottom and left to right: the
# measures a reader can interpret, without QC and fit diagnostics. Others follow by name.
HEATMAP_TERRAIN = (
    "sq_m",
    "ssk",
    "sku",
    "sdq",
    "sdr",
    "sal_m",
    "str",
    "hurst_psd",
    "hurst_variogram",
    "slope_entropy_bits",
    "aspect_entropy_bits",
    "permutation_entropy_2d",
    "js_complexity_2d",
    "entropy_density_2d_bits",
    "excess_entropy_2d_bits",
)
HEATMAP_MOVEMENT = (
    "stride_frequency_hz",
    "stride_length_m",
    "duty_factor",
    "speed_m_s",
    "hildebrand_fore_hind_phase",
    "rqa_det",
    "rqa_lam",
    "rqa_l_mean_s",
    "rqa_entr",
    "permutation_entropy",
    "js_complexity",
    "entropy_rate_bits",
    "lz76_entropy_rate_bits",
    "statistical_complexity_bits",
    "sample_entropy",
    "step_class_entropy_rate_bits",
)


def measure_order(names: Iterable[str], preferred: tuple[str, ...]) -> list[str]:
    """``names`` in the preferred order, the rest after them by name."""
    names = list(dict.fromkeys(names))
    first = [m for m in preferred if m in names]
    return first + sorted(m for m in names if m not in preferred)


# -- units ------------------------------------------------------------------------------------
_PREFIXES = ((1.0, ""), (1e3, "m"), (1e6, "u"), (1e9, "n"))
# Units that take an SI prefix on their leading symbol; the rest are shown as stored.
_PREFIXABLE = {"m", "s", "Hz", "m/s"}


def display_unit(unit: str | None) -> str:
    """How a stored unit is written ('1' is 'dimensionless')."""
    if unit in (None, "", "1"):
        return "dimensionless"
    return unit


def si_scale(values: Iterable[float], unit: str | None) -> tuple[float, str]:
    """(factor, unit) so that ``value * factor`` reads in 1 to 1000 of the prefixed unit.

    The prefix is chosen from the median magnitude of the finite values: Sq of 36 um is
    shown as 36 um, not 3.6e-05 m. Units that take no prefix come back with factor 1.
    """
    if unit not in _PREFIXABLE:
        return 1.0, display_unit(unit)
    mags = sorted(abs(float(v)) for v in values if v is not None and math.isfinite(float(v)))
    mags = [m for m in mags if m > 0]
    if not mags:
        return 1.0, unit
    typical = mags[len(mags) // 2]
    if unit == "Hz" and typical >= 1000:  # kHz, never mHz: stride rates read best in Hz
        return 1e-3, "kHz"
    if unit == "Hz":
        return 1.0, "Hz"
    if unit == "m" and typical >= 1000:  # a terrain model's extent: km
        return 1e-3, "km"
    for factor, prefix in _PREFIXES:
        if typical * factor >= 1.0:
            return factor, prefix + unit
    factor, prefix = _PREFIXES[-1]
    return factor, prefix + unit


def slope_unit(y_unit: str, x_unit: str) -> str:
    """Unit of a slope of y on x: 'Hz per um', 'per mm' for a dimensionless y."""
    if y_unit == "dimensionless" and x_unit == "dimensionless":
        return "dimensionless"
    if y_unit == "dimensionless":
        return f"per {x_unit}"
    if x_unit == "dimensionless":
        return y_unit
    return f"{y_unit} per {x_unit}"


def fmt_number(value: Any, digits: int = 3) -> str:
    """A number as both views print it: ``digits`` significant digits, 'n/a' when missing."""
    if value is None:
        return "n/a"
    try:
        v = float(value)
    except (TypeError, ValueError):
        return str(value)
    if not math.isfinite(v):
        return "n/a"
    if v == 0:
        return "0"
    text = f"{v:.{digits}g}"
    if "e" in text and 1e3 <= abs(v) < 1e9:  # 1550, not 1.55 x 10^3: rounded, then plain
        return f"{float(text):.0f}"
    if "e" in text:  # still outside the prefix range: plain scientific, never '3.63e-05'
        mantissa, exp = text.split("e")
        return f"{mantissa} x 10^{int(exp)}"
    return text


def recipe_label(name: str, version: int | None) -> str:
    """The one way a recipe is named in views and exports: ``default@1``."""
    return name if version is None else f"{name}@{version}"
