"""Assemble the self-contained ``report.html`` (inline CSS and PNG figures, no scripts)."""

from __future__ import annotations

import html
import math
from collections.abc import Mapping
from datetime import UTC, datetime
from typing import Any

import numpy as np

from service.report import figures
from service.report.panels import movement_panels, terrain_panels
from service.report.study import StudyData, load_study

__all__ = ["MIN_TRIAL_S", "REPORT_CSP", "build_report", "design_warnings", "strongest_pairs"]

# A trial shorter than this holds only a few strides at the demo animal's ~1-3 Hz stride
# frequency: entropy and recurrence estimates from it are rough (common practice).
MIN_TRIAL_S = 5.0
MIN_STRIDES = 10
# The report carries no scripts and loads nothing: only inline styles and data: images.
REPORT_CSP = (
    "default-src 'none'; img-src data:; style-src 'unsafe-inline'; base-uri 'none'; "
    "form-action 'none'; frame-ancestors 'none'"
)
TERRAIN_ROUGHNESS_KEY = "sq_m"
# The heatmap shows these when scored (the CSV and JSON hold the whole grid): the measures a
# reader can interpret, without QC and fit diagnostics (filled fraction, R^2, cut-off).
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
QC_PREFIXES = ("heightmap_",)
QC_SUFFIXES = ("_r2",)
QC_MEASURES = frozenset({"valid_fraction", "noise_floor_m", "cutoff_hz", "n_strides"})

_CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,sans-serif;margin:0;color:#1a1a1a;
background:#fafafa;line-height:1.45}
main{max-width:1180px;margin:0 auto;padding:1rem 1.5rem 3rem}
h1{font-size:1.6rem;margin:.6rem 0}h2{font-size:1.2rem;margin-top:2rem;border-bottom:1px solid #ccc}
.banner{background:#fff3cd;border:2px solid #b8860b;padding:.7rem 1rem;font-weight:600}
.warnings{background:#fdecea;border-left:6px solid #b00020;padding:.6rem 1rem}
.warnings li{margin:.25rem 0}
table{border-collapse:collapse;font-size:.85rem;margin:.5rem 0}
th,td{border:1px solid #ccc;padding:.25rem .5rem;text-align:right}
th{background:#eee}td.l,th.l{text-align:left}
figure{margin:.8rem 0}figure img{max-width:100%;height:auto;background:#fff}
figcaption{font-size:.85rem;color:#444}
dl.summary{display:grid;grid-template-columns:max-content auto;gap:.15rem 1rem}
dl.summary dt{font-weight:600}code{font-size:.85em}
"""


def _e(value: Any) -> str:
    return html.escape(str(value), quote=True)


def _fmt(value: Any, digits: int = 3) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        if not math.isfinite(value):
            return "n/a"
        return f"{value:.{digits}g}"
    return str(value)


# -- numbers for the figures ------------------------------------------------------------------
def _pair_arrays(study: StudyData, terrain: str, movement: str) -> dict[str, np.ndarray]:
    rows = [t for t in study.movement if t.arena_id in study.terrain]
    x = np.array([study.terrain[t.arena_id].get(terrain, np.nan) for t in rows], dtype=float)
    y = np.array([t.values.get(movement, np.nan) for t in rows], dtype=float)
    arena = np.array([t.arena_id for t in rows], dtype=int)
    ok = np.isfinite(x) & np.isfinite(y)
    return {"x": x[ok], "y": y[ok], "arena": arena[ok]}


def _standardised(study: StudyData, row: Mapping[str, Any]) -> float:
    d = _pair_arrays(study, row["terrain_measure"], row["movement_measure"])
    arenas = sorted(set(d["arena"].tolist()))
    if len(arenas) < 2 or d["y"].size < 3:
        return float("nan")
    sd_x = float(np.std([study.terrain[a][row["terrain_measure"]] for a in arenas], ddof=1))
    sd_y = float(np.std(d["y"], ddof=1))
    slope = row.get("slope")
    if slope is None or not sd_y or not math.isfinite(slope):
        return float("nan")
    return float(slope) * sd_x / sd_y


def _is_qc(name: str) -> bool:
    return name in QC_MEASURES or name.startswith(QC_PREFIXES) or name.endswith(QC_SUFFIXES)


def informative_rows(study: StudyData, rows: list[Mapping[str, Any]]) -> list[Mapping[str, Any]]:
    """Rows worth showing: no QC/diagnostic measures, and both measures vary in the data."""
    varying_t = {
        m
        for m in {r["terrain_measure"] for r in rows}
        if np.ptp([v.get(m, np.nan) for v in study.terrain.values()] or [0]) > 0
    }
    varying_m = {
        m for m in {r["movement_measure"] for r in rows} if np.nanmax(_spread(study, m)) > 0
    }
    return [
        r
        for r in rows
        if not _is_qc(r["terrain_measure"])
        and not _is_qc(r["movement_measure"])
        and r["terrain_measure"] in varying_t
        and r["movement_measure"] in varying_m
    ]


def _spread(study: StudyData, measure: str) -> list[float]:
    vals = np.array([t.values.get(measure, np.nan) for t in study.movement], dtype=float)
    vals = vals[np.isfinite(vals)]
    return [float(np.ptp(vals)) if vals.size else 0.0]


def strongest_pairs(rows: list[Mapping[str, Any]], k: int = 4) -> list[Mapping[str, Any]]:
    """The k pairs with the smallest q (then p, then largest |rho|)."""

    def key(r: Mapping[str, Any]) -> tuple[float, float, float]:
        def num(v: Any, default: float) -> float:
            return float(v) if v is not None and math.isfinite(float(v)) else default

        rho = num(r.get("spearman_rho"), 0.0)
        return (num(r.get("q_value"), 2.0), num(r.get("p_value"), 2.0), -abs(rho))

    return sorted(rows, key=key)[:k]


def _matrix(study: StudyData, rows: list[Mapping[str, Any]], max_side: int = 16) -> dict[str, Any]:
    # Keep the measures of the strongest pairs when the grid is too big to read.
    t_all = set(r["terrain_measure"] for r in rows)
    m_all = set(r["movement_measure"] for r in rows)
    terrain = [m for m in HEATMAP_TERRAIN if m in t_all]
    movement = [m for m in HEATMAP_MOVEMENT if m in m_all]
    if len(terrain) < 2 or len(movement) < 2:
        terrain = list(dict.fromkeys(r["terrain_measure"] for r in rows))
        movement = list(dict.fromkeys(r["movement_measure"] for r in rows))
    if len(terrain) > max_side or len(movement) > max_side:
        best = strongest_pairs(rows, k=len(rows))
        terrain = list(dict.fromkeys(r["terrain_measure"] for r in best))[:max_side]
        movement = list(dict.fromkeys(r["movement_measure"] for r in best))[:max_side]
    effect = np.full((len(terrain), len(movement)), np.nan)
    q = np.full_like(effect, np.nan)
    index = {(r["terrain_measure"], r["movement_measure"]): r for r in rows}
    for i, tm in enumerate(terrain):
        for j, mm in enumerate(movement):
            r = index.get((tm, mm))
            if r is not None:
                effect[i, j] = _standardised(study, r)
                q[i, j] = r["q_value"] if r.get("q_value") is not None else np.nan
    return {"terrain": terrain, "movement": movement, "effect": effect, "q": q}


# -- warnings ---------------------------------------------------------------------------------
def design_warnings(study: StudyData, correspondence: Mapping[str, Any]) -> list[str]:
    """The correspondence warnings plus the report's own: short trials, surrogates, failures."""
    out = [str(w) for w in correspondence.get("warnings") or []]
    rows = correspondence.get("rows") or []
    if study.is_invented():
        out.insert(
            0,
            "These data are invented (generated by the gaitscape demo); no result "
            "here says anything about real animals or real ground.",
        )
    durations = [t.duration_s for t in study.movement if math.isfinite(t.duration_s)]
    if durations and float(np.median(durations)) < MIN_TRIAL_S:
        out.append(
            f"Short trials: median length {np.median(durations):.1f} s (< {MIN_TRIAL_S:.0f} s). "
            "Entropy, recurrence and step-class measures from a few strides are rough."
        )
    strides = [t.values.get("n_strides", np.nan) for t in study.movement]
    few = sum(1 for s in strides if math.isfinite(s) and s < MIN_STRIDES)
    if few:
        out.append(f"{few} of {len(strides)} trials have fewer than {MIN_STRIDES} strides.")
    if rows and not any((r.get("q_value") or 1.0) < 0.05 for r in rows):
        out.append("No pair reaches q < 0.05 after Benjamini-Hochberg across the grid.")
    if study.failed_jobs:
        out.append(
            f"{len(study.failed_jobs)} scoring jobs failed: " + "; ".join(study.failed_jobs[:5])
        )
    pending = study.job_counts.get("queued", 0) + study.job_counts.get("running", 0)
    if pending:
        out.append(f"{pending} scoring jobs are still queued or running; this report is partial.")
    return out


# -- sections ---------------------------------------------------------------------------------
def _summary_section(study: StudyData, correspondence: Mapping[str, Any]) -> str:
    n_a = correspondence.get("n_arenas", len(study.scored_arena_ids))
    n_s = correspondence.get("n_subjects", len({t.subject_id for t in study.movement}))
    n_t = correspondence.get("n_trials", len(study.movement))
    from service import __version__

    name = study.study_name or correspondence.get("study")
    items = [
        ("study", name if name else "all studies (whole store)"),
        ("arenas (scored / registered)", f"{n_a} / {len(study.arenas)}"),
        ("subjects", n_s),
        ("trials (scored / uploaded)", f"{n_t} / {len(study.trials)}"),
        ("scans", len(study.scans)),
        ("recipe", f"{study.recipe_name} v{study.recipe_version}"),
        ("recipe hash", study.recipe_hash),
        ("code version", "; ".join(study.code_versions) or f"gaitscape {__version__}"),
        ("report generated", datetime.now(UTC).isoformat(timespec="seconds")),
    ]
    body = "".join(f"<dt>{_e(k)}</dt><dd><code>{_e(v)}</code></dd>" for k, v in items)
    return (
        f'<section id="summary"><h2>Study summary</h2><dl class="summary">{body}</dl>'
        f"{_arena_table(study)}</section>"
    )


def _arena_table(study: StudyData) -> str:
    """One row per arena: kind, scans, scored trials and its headline terrain values."""
    head = "<tr><th class='l'>arena</th><th class='l'>kind</th><th>scans</th><th>trials</th>"
    head += "<th>Sq (m)</th><th>H (PSD, dimensionless)</th></tr>"
    rows = []
    for a in study.arenas:
        t = study.terrain.get(a.id, {})
        n_scans = sum(s.arena_id == a.id for s in study.scans)
        n_trials = sum(m.arena_id == a.id for m in study.movement)
        rows.append(
            f"<tr><td class='l'>{_e(a.name)}</td><td class='l'>{_e(a.kind)}</td>"
            f"<td>{n_scans}</td><td>{n_trials}</td><td>{_fmt(t.get('sq_m'))}</td>"
            f"<td>{_fmt(t.get('hurst_psd'))}</td></tr>"
        )
    return f"<h3>Arenas</h3><table><thead>{head}</thead><tbody>{''.join(rows)}</tbody></table>"


def _warnings_section(warnings: list[str]) -> str:
    if not warnings:
        return '<section id="warnings"><h2>Warnings</h2><p>None.</p></section>'
    # Pairwise collinearity notes can run to dozens: fold them so the others stay visible.
    folded = [w for w in warnings if "the same thing twice" in w]
    main = [w for w in warnings if "the same thing twice" not in w]
    items = "".join(f"<li>{_e(w)}</li>" for w in main)
    if folded:
        inner = "".join(f"<li>{_e(w)}</li>" for w in folded)
        items += (
            f"<li><details><summary>{len(folded)} pairs of measures are near-duplicates across "
            f"these arenas (their correspondences are not separate findings)</summary>"
            f"<ul>{inner}</ul></details></li>"
        )
    return (
        f'<section id="warnings"><h2>Warnings</h2><div class="warnings" role="alert">'
        f"<ul>{items}</ul></div></section>"
    )


def _img(uri: str, alt: str, caption: str) -> str:
    return (
        f'<figure><img src="{uri}" alt="{_e(alt)}"><figcaption>{_e(caption)}</figcaption></figure>'
    )


def _table(rows: list[Mapping[str, Any]], units: Mapping[str, str]) -> str:
    head = ("terrain", "movement", "slope", "95 % CI", "p", "q", "rho", "arenas", "trials")
    out = ["<table><thead><tr>"]
    out += [f'<th class="{"l" if i < 2 else ""}">{h}</th>' for i, h in enumerate(head)]
    out.append("</tr></thead><tbody>")
    for r in rows:
        unit = f"{figures.unit_label(units.get(r['movement_measure']))} per " + figures.unit_label(
            units.get(r["terrain_measure"])
        )
        out.append(
            f'<tr><td class="l">{_e(r["terrain_measure"])}</td>'
            f'<td class="l">{_e(r["movement_measure"])}</td>'
            f'<td title="{_e(unit)}">{_fmt(r.get("slope"))}</td>'
            f"<td>[{_fmt(r.get('ci_low'))}, {_fmt(r.get('ci_high'))}]</td>"
            f"<td>{_fmt(r.get('p_value'))}</td><td>{_fmt(r.get('q_value'))}</td>"
            f"<td>{_fmt(r.get('spearman_rho'), 2)}</td><td>{_e(r.get('n_arenas', ''))}</td>"
            f"<td>{_e(r.get('n_trials', ''))}</td></tr>"
        )
    out.append("</tbody></table>")
    return "".join(out)


def _ce_points(
    study: StudyData, correspondence: Mapping[str, Any]
) -> tuple[list[Any], list[Any], list[Any]]:
    """Plane points and admissible-region curves (from the correspondence's plane view)."""
    from types import SimpleNamespace

    from measures import complexity_entropy_bounds

    plane = correspondence.get("plane") or {}

    def finite(*values: Any) -> bool:
        return all(v is not None and math.isfinite(float(v)) for v in values)

    arenas = [
        (p["arena_id"], p["name"], p["H"], p["C"])
        for p in plane.get("arenas", [])
        if finite(p.get("H"), p.get("C"))
    ]
    trials = [
        (p["arena_id"], p["H"], p["C"])
        for p in plane.get("trials", [])
        if finite(p.get("H"), p.get("C"))
    ]
    bounds, seen = [], set()
    for b in (plane.get("bounds") or {}).values():
        if b["n_patterns"] in seen:
            continue
        seen.add(b["n_patterns"])
        bounds.append(
            SimpleNamespace(
                **{k: np.asarray(v) if isinstance(v, list) else v for k, v in b.items()}
            )
        )
    if not bounds and (arenas or trials):
        order = (study.parameters.get("movement") or {}).get("ordinal_order") or 4
        bounds = [complexity_entropy_bounds(math.factorial(int(order)), n_points=300)]
    return arenas, trials, bounds


def _figure_sections(
    study: StudyData,
    correspondence: Mapping[str, Any],
    session: Any,
    store: Any,
    colours: dict[int, Any],
) -> list[str]:
    rows = informative_rows(study, list(correspondence.get("rows") or []))
    parts = ['<section id="terrain"><h2>Terrain</h2>']
    tpanels = terrain_panels(study, store)
    if tpanels:
        thumbs, spectra = figures.terrain_figure(tpanels, colours)
        parts.append(
            _img(
                thumbs,
                "hillshade thumbnails of each arena",
                "Hillshade of each arena's stored heightmap (light from the north-west); "
                "frame colour = roughness rank, as in every figure.",
            )
        )
        parts.append(
            _img(
                spectra,
                "radially averaged PSD and slope histograms",
                "Left: isotropic PSD with the power-law fit (dashed) whose exponent "
                "gives the PSD Hurst estimate. Right: distribution of local slopes.",
            )
        )
    else:
        parts.append("<p>No stored heightmap yet.</p>")
    parts.append('</section><section id="movement"><h2>Movement</h2>')
    mpanels = movement_panels(study, session=session, store=store, rank_by=TERRAIN_ROUGHNESS_KEY)
    if mpanels:
        parts.append(
            _img(
                figures.movement_figure(mpanels),
                "recurrence plots and SSA portraits",
                "A trial on the smoothest and one on the roughest arena: recurrence plot "
                "of the delay-embedded foot-height signal (block-averaged), its SSA "
                "phase portrait, and the step-cycle class of each stride.",
            )
        )
    else:
        parts.append("<p>No scored trial yet.</p>")
    parts.append('</section><section id="correspondence"><h2>Correspondence</h2>')
    if rows:
        m = _matrix(study, rows)
        parts.append(
            _img(
                figures.heatmap_figure(m["terrain"], m["movement"], m["effect"], m["q"]),
                "correspondence heatmap",
                "Mixed-model slope (subject as random intercept) scaled by the SD of the "
                "terrain measure across arenas over the SD of the movement measure "
                "across trials; * = q < 0.05 (arena-level permutation test, "
                "Benjamini-Hochberg across the grid); grey = not estimable.",
            )
        )
        best = strongest_pairs(rows, k=4)
        pairs = []
        for r in best:
            d = _pair_arrays(study, r["terrain_measure"], r["movement_measure"])
            pairs.append(
                {
                    **r,
                    **d,
                    "terrain_unit": study.units.get(r["terrain_measure"]),
                    "movement_unit": study.units.get(r["movement_measure"]),
                }
            )
        pairs = [p for p in pairs if p["x"].size]
        if pairs:
            parts.append(
                _img(
                    figures.scatter_figure(pairs, colours),
                    "strongest pairs",
                    "Strongest pairs: trials (dots), arena means (diamonds), the "
                    "mixed-model slope through the centroid and its 95 % CI (band).",
                )
            )
        parts.append("<h3>Strongest pairs</h3>" + _table(best, study.units))
        parts.append(
            "<p>Pairs with a QC measure or a measure constant across the study are left "
            "out of the figures; the full grid is in the JSON and CSV "
            "(<code>/v1/correspondence?format=csv</code>).</p>"
        )
    else:
        parts.append("<p>No correspondence rows (too few scored arenas or trials).</p>")
    arenas, trials, bounds = _ce_points(study, correspondence)
    parts.append('</section><section id="complexity-entropy"><h2>Complexity-entropy plane</h2>')
    if arenas or trials:
        parts.append(
            _img(
                figures.complexity_entropy_figure(arenas, trials, bounds, colours),
                "complexity-entropy plane",
                "Surfaces (2-D ordinal patterns) and foot-height signals (1-D ordinal "
                "patterns) on the same plane; curves bound the admissible region.",
            )
        )
    parts.append("</section>")
    return parts


def build_report(
    *,
    session: Any,
    store: Any,
    correspondence: Mapping[str, Any],
    recipe: str | None = None,
    study: StudyData | None = None,
) -> str:
    """The report for ``recipe`` as one HTML string (no external resources); without
    ``study`` data it is loaded for the study the correspondence names (if any)."""
    if study is None:
        study = load_study(session=session, recipe=recipe, study=correspondence.get("study"))
    roughness = {a: v.get(TERRAIN_ROUGHNESS_KEY, np.nan) for a, v in study.terrain.items()}
    colours = figures.arena_colours([a.id for a in study.arenas], roughness)
    warnings = design_warnings(study, correspondence)
    banner = ""
    if study.is_invented():
        banner = (
            '<p class="banner">Invented data: this study was generated by '
            "<code>gaitscape demo</code>. The numbers are real outputs of the pipeline "
            "on synthetic ground and a synthetic animal.</p>"
        )
    parts = [
        "<!doctype html><html lang='en'><head><meta charset='utf-8'>",
        "<meta name='viewport' content='width=device-width, initial-scale=1'>",
        f"<title>gaitscape report: {_e(study.recipe_name)}"
        f"{' - ' + _e(study.study_name) if study.study_name else ''}</title>"
        f"<style>{_CSS}</style></head>",
        "<body><main><h1>gaitscape correspondence report</h1>",
        banner,
        _warnings_section(warnings),
        _summary_section(study, correspondence),
        *_figure_sections(study, correspondence, session, store, colours),
        "</main></body></html>",
    ]
    return "\n".join(parts)
