"""The discrimination table written by bench/bench_discrimination.py.

The report orders its measure list by this table, so it must cover every headline
measure and keep its schema. The values themselves are the benchmark's business
(DeepMimic clips from the pybullet wheel, the demo's trays, synthetic surfaces); this
test checks only what the report relies on.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest

from service.analysis.tables import HEADLINE_MEASURES

TABLE = Path(__file__).resolve().parents[1] / "service" / "report" / "discrimination.json"
ROW_FIELDS = {"measure", "side", "dataset", "effect", "effect_kind", "n", "separates", "note"}
KINDS = {"movement": "hedges_g", "terrain": "spearman_rho"}


@pytest.fixture(scope="module")
def table() -> dict:
    return json.loads(TABLE.read_text())


def test_header_names_its_origin_and_rules(table: dict) -> None:
    assert table["command"].startswith("python bench/bench_discrimination.py")
    assert table["mode"] in {"quick", "full"}
    assert ("--quick" in table["command"]) == (table["mode"] == "quick")
    assert table["generated_at"][:4].isdigit()
    assert set(table["rules"]) >= {"movement", "terrain", "nothing"}
    assert any("invented" in note for note in table["notes"])  # the demo is said to be invented


def test_rows_follow_the_schema_and_the_stated_rule(table: dict) -> None:
    assert table["rows"]
    for row in table["rows"]:
        assert set(row) >= ROW_FIELDS, row
        assert row["effect_kind"] == KINDS[row["side"]]
        assert isinstance(row["separates"], bool)
        eff = row["effect"]
        if eff is None:
            continue
        assert math.isfinite(eff)
        if row["side"] == "terrain":
            assert -1.0 <= eff <= 1.0
            assert row["separates"] == (abs(eff) >= 0.5)
            assert isinstance(row["n"], int) and row["n"] >= 4
        else:
            assert all(isinstance(v, int) for v in row["n"].values()) and len(row["n"]) == 2
            delta = row["cliffs_delta"]
            assert -1.0 <= delta <= 1.0
            assert row["separates"] == (abs(eff) >= 0.8 and abs(delta) >= 0.474)


def test_every_headline_measure_has_a_verdict(table: dict) -> None:
    verdicts = {(m["side"], m["measure"]): m for m in table["measures"]}
    for side, names in HEADLINE_MEASURES.items():
        for name in names:
            assert (side, name) in verdicts, f"{side} {name} missing from the table"
            m = verdicts[(side, name)]
            assert m["separates"] == bool(m["separates_on"])
            if not m["separates"]:
                assert m["verdict"] == "separates nothing on these data"
