"""The report's drawing shortcuts give what matplotlib itself gives.

Checked against matplotlib (the reference library): the PNG written straight from the Agg
canvas holds the same pixels as ``Figure.savefig`` at the same DPI; a log axis trimmed to its
view draws the same ticks as matplotlib's stock log axis, with the same labels written as
plain text (10 and a superscript exponent, as the stock mathtext label typesets it).
"""

from __future__ import annotations

import base64
import io
import math

import numpy as np
import pytest
from matplotlib.figure import Figure
from PIL import Image

from service.report import figures

SUPERSCRIPT = dict(zip("0123456789-", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻", strict=True))


def _drawn(axis) -> list[tuple[float, str]]:
    # The ticks the axis will draw (matplotlib drops those outside the view here).
    return [(t.get_loc(), t.label1.get_text()) for t in axis._update_ticks()]


def test_png_has_the_pixels_savefig_gives() -> None:
    fig = figures._figure(3.0, 2.0)
    ax = fig.add_subplot()
    ax.plot([0, 1, 2], [1, 0, 2], color="C1")
    ax.set_title("t (s)")
    ours = Image.open(io.BytesIO(base64.b64decode(figures.png_data_uri(fig).split(",", 1)[1])))
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=figures.DPI)
    theirs = Image.open(buf).convert("RGB")
    assert ours.mode == "RGB"
    assert ours.size == (round(3.0 * figures.DPI), round(2.0 * figures.DPI))
    assert np.array_equal(np.asarray(ours), np.asarray(theirs))


@pytest.mark.parametrize(
    "limits",
    [(6.0, 4000.0), (1e-14, 1e-7), (1.3e-5, 0.45), (0.3, 3.0), (2.0, 9.0)],
)
def test_log_axis_draws_matplotlibs_ticks_with_plain_labels(limits) -> None:
    fig = Figure(figsize=(4.0, 3.0))
    ax = fig.add_subplot()
    ax.set_yscale("log")
    ax.set_ylim(*limits)
    stock = _drawn(ax.yaxis)
    figures._plain_log_axis(ax.yaxis)
    ours = _drawn(ax.yaxis)
    assert [loc for loc, _ in ours] == pytest.approx([loc for loc, _ in stock], rel=1e-12)
    for (loc, label), (_, stock_label) in zip(ours, stock, strict=True):
        assert bool(label) == bool(stock_label), (loc, label, stock_label)
        exponent = math.log10(loc)
        if label and abs(exponent - round(exponent)) < 1e-9:
            power = "".join(SUPERSCRIPT[c] for c in str(round(exponent)))
            assert label == "10" + power
            assert stock_label == rf"$\mathdefault{{10^{{{round(exponent)}}}}}$"
    # Only ticks inside the view are built (the stock locator adds decades on both sides).
    lo, hi = limits
    built = np.concatenate([ax.yaxis.get_majorticklocs(), ax.yaxis.get_minorticklocs()])
    assert np.all((built >= lo * (1 - 1e-9)) & (built <= hi * (1 + 1e-9)))


def _panel(classes: list[int]):
    from service.report.panels import MovementPanel

    t = np.linspace(0.0, 2.0 * np.pi, 50)
    return MovementPanel(
        trial_id=1, arena_name="a", subject_label="s", recurrence=np.eye(8), duration_s=1.0,
        ssa_pair=np.column_stack([np.cos(t), np.sin(t)]) * 1e-3,
        class_sequence=np.asarray(classes), frame_rate_hz=50.0,
    )  # fmt: skip


def _height_px(uri: str) -> int:
    return Image.open(io.BytesIO(base64.b64decode(uri.split(",", 1)[1]))).size[1]


def test_step_cycle_strips_only_when_the_classes_differ() -> None:
    # One class on every stride says nothing a sentence would not (the report says it);
    # two classes anywhere bring the strips back, one row a trial.
    one = [_panel([0, 0, 0]), _panel([0, 0])]
    two = [_panel([0, 1, 0]), _panel([0, 0])]
    assert not figures.classes_vary(one)
    assert figures.classes_vary(two)
    assert _height_px(figures.movement_figure(two)) - _height_px(
        figures.movement_figure(one)
    ) == round(0.9 * figures.DPI)


def test_lengths_take_the_si_prefix_of_their_size() -> None:
    # SI prefixes (BIPM, The International System of Units, 9th ed. 2019, table 7): a tray's
    # 36 um roughness, a runway's 1.2 m, a terrain model's 8.7 km (the report's thumbnails
    # and tables share this rule).
    from service.report.convention import si_scale

    assert si_scale([36e-6], "m") == (1e6, "um")
    assert si_scale([1.2, 0.25, 3.0], "m") == (1.0, "m")
    assert si_scale([870.0, 8700.0, 9000.0], "m") == (1e-3, "km")
    assert si_scale([2400.0], "Hz") == (1e-3, "kHz")
