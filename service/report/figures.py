"""Matplotlib figures for the report, rendered server-side to inline PNG (base64).

Colour choices (all perceptually uniform or designed for colour-vision deficiency):
- arenas are coloured by their rank of roughness (Sq) on ``viridis``, the same colour in every
  figure, so "yellow = rough" reads across the page;
- hillshades are grey (a shaded relief is a lightness map; grey keeps it monotone);
- the recurrence plot uses ``cividis`` (uniform, and near-identical for the common
  deficiencies, Nuñez et al. 2018);
- the correspondence heatmap uses ``PuOr``, a ColorBrewer diverging scheme marked
  colour-blind safe (Harrower & Brewer 2003), centred on zero: red-green schemes and
  ``coolwarm``'s equal-lightness ends are avoided because the sign must survive a
  deuteranope's eye and a grey-scale print;
- step-cycle classes use the Okabe-Ito qualitative palette (Okabe & Ito 2008).

We use ``matplotlib.figure.Figure`` directly (no pyplot state), so figures are safe to render
in a server's worker threads.
"""

from __future__ import annotations

import base64
import io
import math
from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

import numpy as np
from matplotlib import colormaps
from matplotlib.collections import LineCollection
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.ticker import LogFormatterSciNotation, LogLocator

from service.report.panels import MovementPanel, TerrainPanel

if TYPE_CHECKING:
    from matplotlib.typing import RcKeyType

__all__ = [
    "OKABE_ITO",
    "arena_colours",
    "complexity_entropy_figure",
    "heatmap_figure",
    "main_result_figure",
    "movement_figure",
    "png_data_uri",
    "terrain_figure",
    "unit_label",
]

OKABE_ITO = ("#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7", "#000000")
DPI = 110
_STYLE: dict[RcKeyType, float] = {
    "font.size": 9,
    "axes.titlesize": 9,
    "axes.labelsize": 9,
    "legend.fontsize": 7.5,
    # A fixed title height: matplotlib otherwise measures every axes' tick labels at draw
    # time to lift the title over top-side ticks, which no figure here has.
    "axes.titley": 1.0,
}


_SUPERSCRIPT = str.maketrans("0123456789-", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻")


class _PlainLogFormatter(LogFormatterSciNotation):
    """Log-axis tick labels as plain text with Unicode superscripts (10\u207b\u00b3): the
    default mathtext labels were parsed afresh in every report."""

    def __call__(self, x: float, pos: int | None = None) -> str:
        text = str(super().__call__(x, pos))
        if not text:
            return text
        text = text.removeprefix("$\\mathdefault{").removesuffix("}$")
        mantissa, power, exponent = text.partition("^{")
        out = mantissa.replace("\\times", "\u00d7").replace("-", "\u2212")
        return out + exponent.removesuffix("}").translate(_SUPERSCRIPT) if power else out


class _InViewLogLocator(LogLocator):
    """matplotlib's log locator, returning only the ticks inside the view.

    The stock locator adds a decade or more on each side, and the axis builds a full tick
    (two lines, two labels) for each before dropping it from the drawing; on the spectra's
    eight-decade axes that was a third of their ticks. The test is the one the axis applies
    when it drops them (in log space, within 1e-10 of the span), so the drawn ticks are
    the same.
    """

    def __call__(self) -> Any:
        locs = np.asarray(super().__call__(), dtype=float)
        if self.axis is None or locs.size == 0:
            return locs
        vmin, vmax = sorted(self.axis.get_view_interval())
        if not vmin > 0:
            return locs
        lo, hi = math.log10(vmin), math.log10(vmax)
        tol = 1e-10 * (hi - lo)
        with np.errstate(divide="ignore", invalid="ignore"):
            t = np.log10(locs)
        return locs[(t >= lo - tol) & (t <= hi + tol)]


def _plain_log_axis(axis: Any) -> None:
    """Locators and formatters of a log axis as matplotlib's log scale sets them (every
    decade labelled; minor ticks, labelled only when decades are few), trimmed to the view
    and with plain-text labels."""
    axis.set_major_locator(_InViewLogLocator(10.0))
    axis.set_minor_locator(_InViewLogLocator(10.0, subs=None))
    axis.set_major_formatter(_PlainLogFormatter())
    axis.set_minor_formatter(_PlainLogFormatter(labelOnlyBase=False))


def unit_label(unit: str | None) -> str:
    """Axis-label unit: '1' is written 'dimensionless' (SI writes it '1')."""
    if unit in (None, "", "1"):
        return "dimensionless"
    return unit


def _float(value: Any) -> float:
    return float("nan") if value is None else float(value)


def _num(value: Any, digits: int = 3) -> str:
    v = _float(value)
    return "n/a" if not math.isfinite(v) else f"{v:.{digits}g}"


def axis_label(measure: str, unit: str | None) -> str:
    return f"{measure} ({unit_label(unit)})"


def png_data_uri(fig: Figure) -> str:
    """Draw ``fig`` once with Agg and return it as an opaque RGB PNG data URI."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from PIL import Image

    # No bbox_inches="tight": every figure sets its margins, and "tight" draws twice.
    # The figure is drawn at DPI from the start (_figure), so this is savefig's one draw;
    # the PNG is then written by Pillow directly, as RGB (the figures are opaque white)
    # at zlib level 1: as small as matplotlib's level-6 RGBA files here, in half the time.
    canvas = FigureCanvasAgg(fig)
    canvas.draw()  # type: ignore[no-untyped-call]  # matplotlib's stub leaves it untyped
    rgba = canvas.buffer_rgba()  # type: ignore[no-untyped-call]
    rgb = Image.frombuffer("RGBA", canvas.get_width_height(), rgba).convert("RGB")
    buf = io.BytesIO()
    rgb.save(buf, format="png", compress_level=1)
    return "data:image/png;base64," + base64.b64encode(buf.getvalue()).decode("ascii")


def _figure(width: float, height: float) -> Figure:
    import matplotlib

    matplotlib.rcParams.update(_STYLE)
    # No layout engine: constrained layout measured every tick label of every axes and took
    # two thirds of the report's time. Each figure sets its margins in inches (_margins).
    return Figure(figsize=(width, height), dpi=DPI)


def _margins(
    fig: Figure,
    *,
    left: float,
    right: float,
    bottom: float,
    top: float,
    cols: int = 1,
    rows: int = 1,
    wgap: float = 0.0,
    hgap: float = 0.0,
) -> dict[str, float]:
    """Subplot parameters for margins and gaps given in inches (figure fractions out)."""
    w, h = fig.get_size_inches()
    ax_w = max((w - left - right - (cols - 1) * wgap) / cols, 0.1)
    ax_h = max((h - top - bottom - (rows - 1) * hgap) / rows, 0.1)
    return {
        "left": left / w,
        "right": 1 - right / w,
        "bottom": bottom / h,
        "top": 1 - top / h,
        "wspace": wgap / ax_w,
        "hspace": hgap / ax_h,
    }


def _wrap(text: str, width: int) -> str:
    import textwrap

    return textwrap.fill(text, width)


def arena_colours(arena_ids: Sequence[int], roughness: dict[int, float]) -> dict[int, Any]:
    """viridis by rank of roughness (NaN last); one fixed colour per arena."""
    order = sorted(
        arena_ids, key=lambda a: (not np.isfinite(roughness.get(a, np.nan)), roughness.get(a, 0.0))
    )
    cmap = colormaps["viridis"]
    n = max(len(order) - 1, 1)
    # Stop at 0.92: viridis' last yellow is faint on white.
    return {a: cmap(0.92 * i / n) for i, a in enumerate(order)}


# -- terrain ----------------------------------------------------------------------------------
def terrain_figure(panels: list[TerrainPanel], colours: dict[int, Any]) -> tuple[str, str]:
    """(hillshade thumbnails, PSD + slope histograms) as two PNG data URIs."""
    n = len(panels)
    cols = min(4, n)
    rows = math.ceil(n / cols)
    fig = _figure(2.6 * cols, 1.25 * rows + 0.4)
    fig.subplots_adjust(
        **_margins(fig, left=0.5, right=0.1, bottom=0.45, top=0.25, cols=cols, rows=rows,
                   wgap=0.45, hgap=0.65)
    )  # fmt: skip
    # One length unit for every thumbnail, by the extents (m for a tray, km for a DEM).
    from service.report.convention import si_scale

    scale, unit = si_scale([max(p.extent_m) for p in panels], "m")
    for i, p in enumerate(panels):
        ax = fig.add_subplot(rows, cols, i + 1)
        ex, ey = p.extent_m
        ax.imshow(
            p.hillshade,
            cmap="gray",
            vmin=0,
            vmax=1,
            origin="lower",
            extent=(0, ex * scale, 0, ey * scale),
            interpolation="antialiased",
        )
        ax.set_title(f"{p.arena_name}", color="black", fontsize=8)
        for side in ax.spines.values():
            side.set_edgecolor(colours.get(p.arena_id, "black"))
            side.set_linewidth(2.5)
        ax.set_xlabel(f"x ({unit})")
        if i % cols == 0:
            ax.set_ylabel(f"y ({unit})")
    thumbs = png_data_uri(fig)

    fig = _figure(9.5, 3.4)
    fig.subplots_adjust(
        **_margins(fig, left=0.85, right=0.15, bottom=0.5, top=0.3, cols=2, wgap=0.9)
    )
    ax_psd, ax_slope = fig.subplots(1, 2)
    for p in panels:
        c = colours.get(p.arena_id, "black")
        label = p.arena_name + ("" if not np.isfinite(p.hurst) else f"  (H = {p.hurst:.2f})")
        ok = p.psd > 0
        ax_psd.loglog(p.q[ok], p.psd[ok], color=c, lw=1.4, label=label)
        if p.fit_q.size:
            ax_psd.loglog(p.fit_q, p.fit_psd, color="black", lw=0.9, ls="--")
        width = np.diff(p.slope_edges_deg)
        frac = p.slope_counts / max(p.slope_counts.sum(), 1) / width
        ax_slope.step(p.slope_edges_deg[:-1], frac, where="post", color=c, lw=1.3)
    # Unicode superscripts, not mathtext: parsing "$^{-1}$" cost a second per report.
    ax_psd.set_xlabel("wavenumber q (rad m\u207b\u00b9)")
    ax_psd.set_ylabel("radially averaged PSD C(q) (m\u2074)")
    ax_psd.set_title("Roughness spectra; dashed: power-law fit over the animal-scale band")
    ax_psd.legend(loc="lower left", frameon=False)
    ax_slope.set_yscale("log")
    ax_slope.set_xlabel("local slope (degrees)")
    ax_slope.set_ylabel("fraction of cells per degree (deg\u207b\u00b9)")
    ax_slope.set_title("Slope histograms (band-passed surface)")
    top = max(
        (
            p.slope_edges_deg[:-1][p.slope_counts > 0].max()
            for p in panels
            if (p.slope_counts > 0).any()
        ),
        default=90.0,
    )
    ax_slope.set_xlim(0, min(90.0, top + 2))
    for axis in (ax_psd.xaxis, ax_psd.yaxis, ax_slope.yaxis):
        _plain_log_axis(axis)
    return thumbs, png_data_uri(fig)


# -- movement ---------------------------------------------------------------------------------
def classes_vary(panels: list[MovementPanel]) -> bool:
    """Whether any shown trial has strides in more than one step-cycle class.

    A strip of identical class numbers says nothing a sentence would not: the report draws
    the strips only when the classes differ somewhere, and says so otherwise.
    """
    return any(np.unique(np.asarray(p.class_sequence)).size > 1 for p in panels)


def movement_figure(panels: list[MovementPanel]) -> str:
    """Recurrence plots, SSA phase portraits and (when they vary) step-cycle class strips."""
    n = len(panels)
    strips = classes_vary(panels)
    rows = n + 1 if strips else n
    fig = _figure(9.5, 3.1 * n + (0.9 if strips else 0.0))
    grid = fig.add_gridspec(
        rows,
        2,
        height_ratios=[3.1] * n + ([0.9] if strips else []),
        **_margins(fig, left=0.7, right=0.1, bottom=0.5, top=0.3, cols=2, rows=rows,
                   wgap=1.6, hgap=0.7),
    )  # fmt: skip
    for row, p in enumerate(panels):
        ax = fig.add_subplot(grid[row, 0])
        d = p.duration_s
        im = ax.imshow(
            p.recurrence,
            cmap="cividis",
            vmin=0,
            vmax=1,
            origin="lower",
            extent=(0, d, 0, d),
            interpolation="nearest",
        )
        ax.set_xlabel("time i (s)")
        ax.set_ylabel("time j (s)")
        ax.set_title(f"Recurrence plot, trial {p.trial_id} ({p.subject_label}, {p.arena_name})")
        fig.colorbar(im, ax=ax, label="recurrent fraction of\nblock (dimensionless)", shrink=0.85)
        ax2 = fig.add_subplot(grid[row, 1])
        xy = p.ssa_pair * 1000.0
        if xy.shape[0] > 1:
            seg = np.stack([xy[:-1], xy[1:]], axis=1)
            t = np.arange(xy.shape[0] - 1) / p.frame_rate_hz
            # matplotlib takes an (n, 2, 2) array; its stub only names a sequence of segments
            lc = LineCollection(seg, cmap="viridis", array=t, linewidths=0.8)  # type: ignore[arg-type]
            ax2.add_collection(lc)
            ax2.autoscale()
            fig.colorbar(lc, ax=ax2, label="time (s)", shrink=0.85)
        ax2.set_aspect("equal", adjustable="datalim")
        # Projections of the lag-embedded body-frame coordinates onto the leading
        # eigenvectors: lengths, but summed over lags and markers, not one marker's excursion.
        ax2.set_xlabel("state component 1 (mm, projected)")
        ax2.set_ylabel("state component 2 (mm, projected)")
        ax2.set_title("Whole-body state, two leading components")
    if not strips:
        return png_data_uri(fig)
    ax = fig.add_subplot(grid[n, :])
    n_max = 1
    for row, p in enumerate(panels):
        seq = p.class_sequence
        n_max = max(n_max, seq.size)
        colours = [OKABE_ITO[int(c) % len(OKABE_ITO)] for c in seq]
        ax.bar(
            np.arange(seq.size) + 1,
            0.8,
            bottom=row - 0.4,
            width=0.9,
            color=colours,
            edgecolor="white",
            linewidth=0.5,
        )
        for k, c in enumerate(seq):
            ax.text(k + 1, row, str(int(c) + 1), ha="center", va="center", fontsize=6.5)
    ax.set_yticks(range(n), [f"trial {p.trial_id}" for p in panels])
    ax.set_xlim(0.4, n_max + 0.6)
    ax.set_xlabel("reference-limb stride number (count)")
    ax.set_title("Step-cycle class of each stride (number = class)")
    return png_data_uri(fig)


# -- correspondence ---------------------------------------------------------------------------
def _diverging() -> Any:
    from matplotlib.colors import LinearSegmentedColormap

    from service.report.convention import DIVERGING

    return LinearSegmentedColormap.from_list("gaitscape-diverging", list(DIVERGING)).with_extremes(
        bad="#dddddd"
    )


def heatmap_figure(grid: dict[str, Any]) -> str:
    """The grid of ``service.report.view``: rows terrain (top first), columns movement."""
    terrain, movement = grid["terrain"], grid["movement"]
    effect = np.array(
        [[np.nan if v is None else v for v in row] for row in grid["effect"]], dtype=float
    ).reshape(len(terrain), len(movement))
    q = np.array(
        [[np.nan if v is None else v for v in row] for row in grid["q"]], dtype=float
    ).reshape(len(terrain), len(movement))
    # Margins from the label lengths (about 0.065 in per character at 9 pt; column labels
    # are turned 60 degrees), so nothing is cut without a layout engine.
    title = _wrap(grid["legend"], 60)
    left = 0.45 + 0.065 * max((len(t) for t in terrain), default=4)
    bottom = 0.55 + 0.065 * 0.87 * max((len(m) for m in movement), default=4)
    top = 0.2 + 0.16 * (title.count("\n") + 1)
    right = 1.5
    width = max(5.0, 0.42 * len(movement) + left + right)
    fig = _figure(width, max(2.6, 0.36 * len(terrain) + top + bottom))
    fig.subplots_adjust(**_margins(fig, left=left, right=right, bottom=bottom, top=top))
    ax = fig.add_subplot()
    im = ax.imshow(
        np.ma.masked_invalid(effect),
        cmap=_diverging(),
        vmin=grid["zmin"],
        vmax=grid["zmax"],
        aspect="auto",
    )
    for i in range(len(terrain)):
        for j in range(len(movement)):
            if np.isfinite(q[i, j]) and q[i, j] < 0.05:
                ax.text(j, i, "*", ha="center", va="center", fontsize=12, weight="bold")
    ax.set_xticks(range(len(movement)), movement, rotation=60, ha="right")
    ax.set_yticks(range(len(terrain)), terrain)
    ax.set_xlabel("movement measure")
    ax.set_ylabel("terrain measure")
    fig.colorbar(im, ax=ax, label=_wrap(f"{grid['statistic']} (dimensionless)", 24))
    ax.set_title(title, fontsize=8)
    return png_data_uri(fig)


def main_result_figure(pairs: list[dict[str, Any]], colours: dict[int, Any]) -> str:
    """Per pair: arena means with arena-level intervals and names, subjects as faint lines,
    the arena-level fit (``service.report.view`` pair views, display units)."""
    n = len(pairs)
    cols = min(2, n)
    rows = math.ceil(n / cols)
    fig = _figure(5.2 * cols, 3.9 * rows + 0.25)
    fig.subplots_adjust(
        **_margins(fig, left=0.8, right=0.2, bottom=0.5, top=0.7, cols=cols, rows=rows,
                   wgap=1.0, hgap=0.95)
    )  # fmt: skip
    for k, pair in enumerate(pairs):
        ax = fig.add_subplot(rows, cols, k + 1)
        # One collection per kind of mark, not one artist per subject or arena: the same
        # pixels, a fraction of the artists to set up and draw.
        subjects = [np.asarray(s["points"], dtype=float) for s in pair["subjects"]]
        ax.add_collection(
            LineCollection(subjects, colors="0.55", linewidths=0.8, alpha=0.45, zorder=1,
                           capstyle="projecting"),
            autolim=False,
        )  # fmt: skip
        if pair.get("fit_band"):
            band = np.asarray(pair["fit_band"], dtype=float)
            ax.fill_between(band[:, 0], band[:, 1], band[:, 2], color="0.85", lw=0, zorder=0)
        if pair["fit_line"]:
            line = np.asarray(pair["fit_line"], dtype=float)
            ax.plot(line[:, 0], line[:, 1], color="black", lw=1.4, zorder=2)
        arenas = pair["arenas"]
        arena_colours = [colours.get(a["arena_id"], "grey") for a in arenas]
        bars, bar_colours = [], []
        for a, c in zip(arenas, arena_colours, strict=True):
            lo, hi = _float(a["y_low"]), _float(a["y_high"])
            if np.isfinite(lo) and np.isfinite(hi):
                bars.append([(a["x"], lo), (a["x"], hi)])
                bar_colours.append(c)
        ax.add_collection(
            LineCollection(bars, colors=bar_colours, linewidths=2.0, zorder=3,
                           capstyle="projecting"),
            autolim=False,
        )  # fmt: skip
        ax.scatter(
            [a["x"] for a in arenas],
            [a["y"] for a in arenas],
            s=55,
            color=arena_colours,
            edgecolor="black",
            lw=0.8,
            marker="D",
            zorder=4,
        )
        for a in arenas:
            _name_label(ax, a["name"], (a["x"], a["y"]), (a["label_x"], a["label_y"]), a["leader"])
        ax.set_xlim(*pair["x_range"])
        ax.set_ylim(*pair["y_range"])
        ax.set_xlabel(pair["x_label"])
        ax.set_ylabel(pair["y_label"])
        ax.set_title(_wrap(pair["title"], 75), fontsize=7.5)
        ax.ticklabel_format(axis="both", style="plain", useOffset=False)  # no "+1" offsets
    # One legend for all panels, above them: inside a panel it hid arena names, and
    # matplotlib's search for the emptiest corner cost a tenth of this figure.
    handles = [
        Line2D([], [], color="0.55", lw=0.8, alpha=0.6, label="subjects (mean per arena)"),
        Line2D([], [], color="black", lw=1.4, label="arena-level fit"),
        Line2D([], [], color="grey", marker="D", lw=2.0, markeredgecolor="black",
               markersize=6, label="arena mean, 95 % interval"),
    ]  # fmt: skip
    fig.legend(
        handles=handles,
        loc="upper center",
        bbox_to_anchor=(0.5, 1.0),
        ncol=3,
        frameon=False,
        fontsize=7.5,
    )
    return png_data_uri(fig)


def _name_label(
    ax: Any, name: str, point: tuple[float, float], spot: tuple[float, float], leader: bool
) -> None:
    """An arena name at ``spot``; with ``leader``, a thin line from the name's near end to
    the point (a plain line: matplotlib's arrow clipped at the text box cost a quarter of
    the main-result figure)."""
    left = spot[0] >= point[0]
    props = None
    if leader:
        props = {
            "arrowstyle": "-",
            "color": "0.4",
            "lw": 0.6,
            "relpos": (0.0, 0.5) if left else (1.0, 0.5),
            "patchA": None,
            "shrinkA": 3,
            "shrinkB": 2,
        }
    ax.annotate(
        name,
        point,
        xytext=spot,
        textcoords="data",
        fontsize=7,
        ha="left" if left else "right",
        va="center",
        arrowprops=props,
        zorder=5,
    )


def complexity_entropy_figure(
    arenas: list[tuple[int, str, float, float]],
    trials: list[tuple[int, float, float]],
    bounds: list[Any],
    colours: dict[int, Any],
) -> str:
    """Arenas (squares, 2-D ordinal patterns) and trials (dots) on one H-C plane."""
    fig = _figure(6.2, 4.3)
    fig.subplots_adjust(**_margins(fig, left=0.75, right=0.15, bottom=0.5, top=0.3))
    ax = fig.add_subplot()
    for b in bounds:
        ax.plot(b.entropy_max, b.complexity_max, color="0.35", lw=0.9)
        ax.plot(b.entropy_min, b.complexity_min, color="0.35", lw=0.9, ls=":")
    if bounds:
        ax.plot([], [], color="0.35", lw=0.9, label=f"C max (M = {bounds[0].n_patterns})")
        ax.plot([], [], color="0.35", lw=0.9, ls=":", label="C min")
    if trials:
        ax.scatter(
            [h for _, h, _ in trials],
            [c for *_, c in trials],
            s=16,
            color=[colours.get(arena_id, "grey") for arena_id, *_ in trials],
            alpha=0.8,
            lw=0,
        )
    from service.report.view import place_labels

    top = max([c for *_, c in arenas] + [c for *_, c in trials] + [0.05]) * 1.15
    spots = place_labels([(h, c) for _, _, h, c in arenas], (0.0, 1.0), (0.0, top))
    if arenas:
        ax.scatter(
            [h for _, _, h, _ in arenas],
            [c for *_, c in arenas],
            s=80,
            marker="s",
            color=[colours.get(arena_id, "grey") for arena_id, *_ in arenas],
            edgecolor="black",
            lw=0.8,
            zorder=3,
        )
    # Names pushed apart where squares crowd, with a leader line back to the square.
    for (_, name, h, c), (lx, ly, leader) in zip(arenas, spots, strict=True):
        _name_label(ax, name, (h, c), (lx, ly), leader)
    ax.scatter([], [], s=16, color="grey", label="trials (whole-body state, leading component)")
    ax.scatter([], [], s=60, marker="s", color="grey", edgecolor="black", label="arenas (surface)")
    ax.set_xlim(0, 1.0)
    ax.set_ylim(0, top)
    ax.set_xlabel("normalised permutation entropy H (dimensionless)")
    ax.set_ylabel("Jensen-Shannon complexity C (dimensionless)")
    ax.set_title("Shared complexity-entropy plane (colour: arena roughness rank)")
    ax.legend(loc="upper left", frameon=False)
    return png_data_uri(fig)
