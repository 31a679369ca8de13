"""The numbers the report and the dashboard show for one correspondence, computed once.

``correspondence_view(study, correspondence)`` returns a JSON-ready dict: the grid (statistic,
order, palette, legend), the strongest pairs as display strings, and per pair the data of the
main-result figure (arena means with arena-level intervals, subjects as lines, the arena-level
fit, label positions) in display units. The report draws it with matplotlib, the dashboard
with plotly (``GET /v1/dashboard/correspondence``); neither adds a number of its own.
"""

from __future__ import annotations

import math
from collections import defaultdict
from collections.abc import Mapping
from typing import Any

import numpy as np
from scipy import stats as sps

from service.report import convention as cv
from service.report.study import StudyData

__all__ = ["ARENA_FIELDS", "arena_level", "correspondence_view", "informative_rows"]

QC_PREFIXES = ("heightmap_",)
QC_SUFFIXES = ("_r2",)
QC_MEASURES = frozenset({"valid_fraction", "noise_floor_m", "cutoff_hz", "n_strides"})

# Arena-level fields of a correspondence row (the arena is the unit of replication):
# row field -> our name. ``slope``, ``ci_low`` and ``ci_high`` are the arena-level fit of
# service.analysis.grid; its ``arena_points`` and ``fit_line`` give the figure's points and
# band, so the report, the dashboard and the JSON show one set of numbers.
ARENA_FIELDS: dict[str, str] = {"slope": "slope", "ci_low": "ci_low", "ci_high": "ci_high"}


def _is_qc(name: str) -> bool:
    return name in QC_MEASURES or name.startswith(QC_PREFIXES) or name.endswith(QC_SUFFIXES)


def _finite(v: Any) -> bool:
    try:
        return v is not None and math.isfinite(float(v))
    except (TypeError, ValueError):
        return False


def informative_rows(study: StudyData, rows: list[Mapping[str, Any]]) -> list[Mapping[str, Any]]:
    """Rows worth showing: no QC/diagnostic measures, and both measures vary in the data."""

    def varies(values: list[float]) -> bool:
        vals = [v for v in values if _finite(v)]
        return len(vals) > 1 and max(vals) > min(vals)

    t_names = {r["terrain_measure"] for r in rows}
    m_names = {r["movement_measure"] for r in rows}
    vary_t = {m for m in t_names if varies([v.get(m, np.nan) for v in study.terrain.values()])}
    vary_m = {m for m in m_names if varies([t.values.get(m, np.nan) for t in study.movement])}
    return [
        r
        for r in rows
        if not _is_qc(r["terrain_measure"])
        and not _is_qc(r["movement_measure"])
        and r["terrain_measure"] in vary_t
        and r["movement_measure"] in vary_m
    ]


def strongest(rows: list[Mapping[str, Any]], k: int = 4) -> list[Mapping[str, Any]]:
    """The k pairs with the smallest q (then p, then largest |rho|): one order for both views."""

    def num(v: Any, default: float) -> float:
        return float(v) if _finite(v) else default

    def key(r: Mapping[str, Any]) -> tuple[float, float, float, str, str]:
        return (
            num(r.get("q_value"), 2.0),
            num(r.get("p_value"), 2.0),
            -abs(num(r.get("spearman_rho"), 0.0)),
            r["terrain_measure"],
            r["movement_measure"],
        )

    return sorted(rows, key=key)[:k]


# -- the arena level ----------------------------------------------------------------------------
def _t_interval(values: np.ndarray) -> tuple[float, float, float]:
    """Mean and 95 % t-interval of ``values`` (NaN interval for fewer than 2)."""
    m = float(np.mean(values))
    if values.size < 2:
        return m, float("nan"), float("nan")
    half = float(sps.t.ppf(0.975, values.size - 1) * np.std(values, ddof=1) / np.sqrt(values.size))
    return m, m - half, m + half


def arena_level(study: StudyData, row: Mapping[str, Any]) -> dict[str, Any]:
    """Arena means, their intervals, subject lines and the arena-level fit of one pair (SI).

    Each arena's mean is the mean of its subjects' means (a subject with more trials does not
    weigh more), with a 95 % t-interval over subjects (over trials when one subject walked
    it). The fit is the correspondence's arena-level one when ``ARENA_FIELDS`` names it, else
    ordinary least squares on the arena means with a t-interval on n_arenas - 2 degrees of
    freedom (fallback, labelled so in ``fit["source"]``).
    """
    tm, mm = row["terrain_measure"], row["movement_measure"]
    if row.get("arena_points"):
        return _from_correspondence(study, row)
    per: dict[int, dict[int, list[float]]] = defaultdict(lambda: defaultdict(list))
    for t in study.movement:
        x = study.terrain.get(t.arena_id, {}).get(tm, np.nan)
        y = t.values.get(mm, np.nan)
        if _finite(x) and _finite(y):
            per[t.arena_id][t.subject_id].append(float(y))
    arenas = []
    subjects: dict[int, list[tuple[float, float]]] = defaultdict(list)
    for a in sorted(per, key=lambda a: (study.terrain[a][tm], a)):
        x = float(study.terrain[a][tm])
        means = np.array([np.mean(v) for v in per[a].values()])
        trials = np.concatenate([np.asarray(v) for v in per[a].values()])
        mean, lo, hi = _t_interval(means if means.size > 1 else trials)
        arenas.append(
            {
                "arena_id": int(a),
                "name": study.arena_name(a),
                "x": x,
                "y": mean,
                "y_low": lo,
                "y_high": hi,
                "n_subjects": int(means.size),
                "n_trials": int(trials.size),
            }
        )
        for s, v in per[a].items():
            subjects[s].append((x, float(np.mean(v))))
    labels = {s.id: s.label for s in study.subjects}
    lines = [
        {"subject": labels.get(s, f"subject {s}"), "points": sorted(pts)}
        for s, pts in sorted(subjects.items())
        if len(pts) > 1
    ]
    return {"arenas": arenas, "subjects": lines, "fit": _arena_fit(row, arenas)}


def _subject_lines(study: StudyData, tm: str, mm: str) -> list[dict[str, Any]]:
    """Each subject's mean per arena, as a faint line across arenas (two or more arenas)."""
    per: dict[int, dict[int, list[float]]] = defaultdict(lambda: defaultdict(list))
    for t in study.movement:
        x = study.terrain.get(t.arena_id, {}).get(tm, np.nan)
        y = t.values.get(mm, np.nan)
        if _finite(x) and _finite(y):
            per[t.subject_id][t.arena_id].append(float(y))
    labels = {s.id: s.label for s in study.subjects}
    lines = []
    for s, by_arena in sorted(per.items()):
        pts = sorted((float(study.terrain[a][tm]), float(np.mean(v))) for a, v in by_arena.items())
        if len(pts) > 1:
            lines.append({"subject": labels.get(s, f"subject {s}"), "points": pts})
    return lines


def _from_correspondence(study: StudyData, row: Mapping[str, Any]) -> dict[str, Any]:
    """The figure from the correspondence row itself: its arena points and arena-level fit."""
    nan = float("nan")

    def num(v: Any) -> float:
        return float(v) if _finite(v) else nan

    arenas = [
        {
            "arena_id": int(p["arena_id"]),
            "name": str(p.get("arena_name") or study.arena_name(int(p["arena_id"]))),
            "x": num(p["terrain"]),
            "y": num(p["movement"]),
            "y_low": num(p.get("movement_ci_low")),
            "y_high": num(p.get("movement_ci_high")),
            "n_subjects": int(p.get("n_subjects") or 0),
            "n_trials": int(p.get("n_trials") or 0),
        }
        for p in sorted(row["arena_points"], key=lambda p: (num(p["terrain"]), p["arena_id"]))
    ]
    line = row.get("fit_line") or {}
    fit = {
        "slope": num(row.get("slope")),
        "intercept": num(line.get("intercept")),
        "ci_low": num(row.get("ci_low")),
        "ci_high": num(row.get("ci_high")),
        "source": "correspondence (arena level)",
        "band_x": [num(v) for v in line.get("x", [])],
        "band_low": [num(v) for v in line.get("band_low", [])],
        "band_high": [num(v) for v in line.get("band_high", [])],
    }
    tm, mm = row["terrain_measure"], row["movement_measure"]
    return {"arenas": arenas, "subjects": _subject_lines(study, tm, mm), "fit": fit}


def _arena_fit(row: Mapping[str, Any], arenas: list[dict[str, Any]]) -> dict[str, Any]:
    if ARENA_FIELDS and all(f in row for f in ARENA_FIELDS):
        fit = {ours: row[theirs] for theirs, ours in ARENA_FIELDS.items()}
        fit["source"] = "correspondence (arena level)"
        if fit.get("intercept") is None and arenas:
            xs = np.array([a["x"] for a in arenas])
            ys = np.array([a["y"] for a in arenas])
            fit["intercept"] = float(ys.mean() - float(fit["slope"] or 0.0) * xs.mean())
        return fit
    # FALLBACK (a row without arena-level fields, e.g. from an older store): OLS on arena means.
    xs = np.array([a["x"] for a in arenas], dtype=float)
    ys = np.array([a["y"] for a in arenas], dtype=float)
    nan = float("nan")
    out: dict[str, Any] = {"slope": nan, "intercept": nan, "ci_low": nan, "ci_high": nan}
    out["source"] = "ordinary least squares on the arena means"
    if xs.size < 3 or np.ptp(xs) == 0:
        return out
    res = sps.linregress(xs, ys)
    half = float(sps.t.ppf(0.975, xs.size - 2) * res.stderr)
    out.update(
        slope=float(res.slope),
        intercept=float(res.intercept),
        ci_low=float(res.slope) - half,
        ci_high=float(res.slope) + half,
    )
    return out


# -- labels -------------------------------------------------------------------------------------
def place_labels(
    points: list[tuple[float, float]], x_range: tuple[float, float], y_range: tuple[float, float]
) -> list[tuple[float, float, bool]]:
    """Label anchors beside points, pushed apart vertically where they crowd.

    Works in axes fractions: a label starts 3 % right of its point; labels within 30 % of
    the width of each other keep 7 % of the height apart. Returns (x, y, leader) in data
    units; ``leader`` is True when the label moved off its point (draw a line to it).
    """
    (x0, x1), (y0, y1) = x_range, y_range
    w, h = (x1 - x0) or 1.0, (y1 - y0) or 1.0
    frac = [((x - x0) / w, (y - y0) / h) for x, y in points]
    pos = [[fx + 0.03, fy] for fx, fy in frac]
    if any(fx > 0.7 for fx, _ in frac):  # right-hand points: label to the left
        for p, (fx, _) in zip(pos, frac, strict=True):
            if fx > 0.7:
                p[0] = fx - 0.03
    gap = 0.07
    order = sorted(range(len(pos)), key=lambda i: pos[i][1])
    for _ in range(20):
        moved = False
        for a_i, i in enumerate(order):
            for j in order[a_i + 1 :]:
                if abs(pos[i][0] - pos[j][0]) < 0.3 and pos[j][1] - pos[i][1] < gap:
                    pos[j][1] = pos[i][1] + gap
                    moved = True
        if not moved:
            break
    out = []
    for (_fx, fy), (px, py) in zip(frac, pos, strict=True):
        leader = abs(py - fy) > 0.02
        out.append((x0 + px * w, y0 + py * h, leader))
    return out


def _padded(lo: float, hi: float, pad: float = 0.08) -> tuple[float, float]:
    span = (hi - lo) or (abs(hi) or 1.0)
    return lo - pad * span, hi + pad * span


# -- the view -----------------------------------------------------------------------------------
def _pair_view(study: StudyData, row: Mapping[str, Any]) -> dict[str, Any] | None:
    tm, mm = row["terrain_measure"], row["movement_measure"]
    level = arena_level(study, row)
    arenas = level["arenas"]
    if not arenas:
        return None
    xs = [a["x"] for a in arenas]
    ys = [a[k] for a in arenas for k in ("y", "y_low", "y_high") if _finite(a[k])]
    ys += [p[1] for s in level["subjects"] for p in s["points"]]
    fx, x_unit = cv.si_scale(xs, study.units.get(tm) or _unit_from_name(tm))
    fy, y_unit = cv.si_scale(ys, study.units.get(mm) or _unit_from_name(mm))
    fit = level["fit"]
    s_unit = cv.slope_unit(y_unit, x_unit)
    k = fy / fx  # a slope in SI times this reads in (y display unit) per (x display unit)
    x_range = _padded(min(xs) * fx, max(xs) * fx)
    y_range = _padded(min(ys) * fy, max(ys) * fy)
    # Label positions leave room on the right for names.
    x_range = (x_range[0], x_range[1] + 0.12 * (x_range[1] - x_range[0]))
    labels = place_labels([(a["x"] * fx, a["y"] * fy) for a in arenas], x_range, y_range)
    line = []
    if _finite(fit.get("slope")) and _finite(fit.get("intercept")):
        for x in (min(xs), max(xs)):
            line.append([x * fx, (fit["intercept"] + fit["slope"] * x) * fy])
    band = [
        [x * fx, lo * fy, hi * fy]
        for x, lo, hi in zip(
            fit.get("band_x", []), fit.get("band_low", []), fit.get("band_high", []), strict=False
        )
        if _finite(x) and _finite(lo) and _finite(hi)
    ]
    slope_text = (
        f"{cv.fmt_number(_mul(fit.get('slope'), k))} {s_unit} "
        f"[{cv.fmt_number(_mul(fit.get('ci_low'), k))}, "
        f"{cv.fmt_number(_mul(fit.get('ci_high'), k))}]"
    )
    return {
        "terrain_measure": tm,
        "movement_measure": mm,
        "x_label": f"{tm} ({x_unit})",
        "y_label": f"{mm} ({y_unit})",
        "x_unit": x_unit,
        "y_unit": y_unit,
        "x_range": list(x_range),
        "y_range": list(y_range),
        "arenas": [
            {
                "arena_id": a["arena_id"],
                "name": a["name"],
                "x": a["x"] * fx,
                "y": a["y"] * fy,
                "y_low": _mul(a["y_low"], fy),
                "y_high": _mul(a["y_high"], fy),
                "n_subjects": a["n_subjects"],
                "label_x": lab[0],
                "label_y": lab[1],
                "leader": lab[2],
            }
            for a, lab in zip(arenas, labels, strict=True)
        ],
        "subjects": [
            {"subject": s["subject"], "points": [[x * fx, y * fy] for x, y in s["points"]]}
            for s in level["subjects"]
        ],
        "fit_line": line,
        "fit_band": band,  # [x, low, high]: 95 % confidence band of the arena-level line
        "fit_source": fit["source"],
        "slope_text": slope_text,
        "title": (
            f"arena-level slope {slope_text}; p = {cv.fmt_number(row.get('p_value'))}, "
            f"q = {cv.fmt_number(row.get('q_value'))}, "
            f"rho = {cv.fmt_number(row.get('spearman_rho'), 2)}"
        ),
    }


def _mul(v: Any, k: float) -> float:
    return float(v) * k if _finite(v) else float("nan")


def _unit_from_name(name: str) -> str:
    suffixes = (("_m_s", "m/s"), ("_hz", "Hz"), ("_bits", "bits"), ("_s", "s"), ("_m", "m"))
    for suffix, unit in suffixes:
        if name.endswith(suffix):
            return unit
    return "1"


def correspondence_view(
    study: StudyData, correspondence: Mapping[str, Any], *, k_strongest: int = 4
) -> dict[str, Any]:
    """Everything both views show for ``correspondence`` (JSON-ready; NaN as None)."""
    rows = informative_rows(study, list(correspondence.get("rows") or []))
    terrain = cv.measure_order([r["terrain_measure"] for r in rows], cv.HEATMAP_TERRAIN)
    movement = cv.measure_order([r["movement_measure"] for r in rows], cv.HEATMAP_MOVEMENT)
    index = {(r["terrain_measure"], r["movement_measure"]): r for r in rows}
    effect = [[_cell(index.get((t, m)), cv.EFFECT_FIELD) for m in movement] for t in terrain]
    q = [[_cell(index.get((t, m)), "q_value") for m in movement] for t in terrain]
    best = strongest(rows, k=k_strongest)
    pairs = {}
    for r in strongest(rows, k=len(rows)):
        view = _pair_view(study, r)
        if view is not None:
            pairs[f"{r['terrain_measure']} x {r['movement_measure']}"] = view
    table = []
    for r in best:
        p = pairs.get(f"{r['terrain_measure']} x {r['movement_measure']}")
        table.append(
            {
                "terrain": r["terrain_measure"],
                "movement": r["movement_measure"],
                "slope": p["slope_text"] if p else "n/a",
                "p": cv.fmt_number(r.get("p_value")),
                "q": cv.fmt_number(r.get("q_value")),
                "rho": cv.fmt_number(r.get("spearman_rho"), 2),
                "arenas": str(r.get("n_arenas", "")),
                "trials": str(r.get("n_trials", "")),
            }
        )
    n_perm = correspondence.get("n_permutations")
    exact = bool(correspondence.get("exact_permutations"))
    rule = correspondence.get("scans") or cv.SCAN_POLICY
    kind = (correspondence.get("scan_policy") or {}).get("kind")
    # Rows on fewer arenas (a measure missing in some) were tested with fewer permutations:
    # say so, so the header does not contradict those rows' smallest possible p.
    n_all = correspondence.get("n_arenas")
    fewer = any(
        r.get("n_arenas") is not None and n_all is not None and r["n_arenas"] < n_all
        for r in correspondence.get("rows", [])
    )
    label = {"points": "point-cloud"}.get(str(kind), str(kind))
    same_kind = f", {label} scans where the arena has one" if kind and rule == "latest" else ""
    return _clean_object(
        {
            "study": correspondence.get("study"),
            "settings": {
                "n_permutations": n_perm,
                "exact": exact,
                "scans": rule,
                "text": (
                    f"{'exact test, ' if exact else ''}{n_perm} arena permutations"
                    f"{' (fewer for rows on fewer arenas)' if fewer else ''}; "
                    f"scans: {rule} per arena{same_kind}"
                ),
            },
            "counts": {
                "arenas": correspondence.get("n_arenas"),
                "subjects": correspondence.get("n_subjects"),
                "trials": correspondence.get("n_trials"),
                "pairs": len(rows),
            },
            "grid": {
                "terrain": terrain,
                "movement": movement,
                "effect": effect,
                "q": q,
                "statistic": cv.EFFECT_LABEL,
                "zmin": -1.0,
                "zmax": 1.0,
                "palette": [list(s) for s in cv.DIVERGING],
                "legend": cv.PALETTE_SIGN,
            },
            "strongest": table,
            "table_columns": {
                "terrain": "terrain",
                "movement": "movement",
                "slope": "arena-level slope [95 % CI]",
                "p": "p (arena permutation)",
                "q": "q (BH)",
                "rho": "rho",
                "arenas": "arenas",
                "trials": "trials",
            },
            "pairs": pairs,
            "default_pair": next(iter(pairs), None),
        }
    )


def _cell(row: Mapping[str, Any] | None, field: str) -> float | None:
    if row is None or not _finite(row.get(field)):
        return None
    return float(row[field])


def _clean(obj: Any) -> Any:
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {k: _clean(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_clean(v) for v in obj]
    if isinstance(obj, np.generic):
        return _clean(obj.item())
    return obj


def _clean_object(obj: dict[str, Any]) -> dict[str, Any]:
    """:func:`_clean` for a JSON object, typed as one."""
    return {k: _clean(v) for k, v in obj.items()}
