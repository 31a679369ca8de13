"""Exports as pandas reads them (issue 18, item 6): typed columns, one recipe label, 404s.

Reference: pandas' nullable integer dtype (``Int64``, pandas >= 1.0 docs, "Nullable integer
data type") and Apache Parquet's logical types (TIMESTAMP with UTC adjustment).
"""

from __future__ import annotations

import io

import pandas as pd
import pytest
from test_scores_export import study  # noqa: F401 (the fixture)


def test_parquet_columns_have_the_types_pandas_expects(study) -> None:  # noqa: F811
    client, _, _ = study
    pq = client.get("/v1/export/scores", params={"format": "parquet"})
    back = pd.read_parquet(io.BytesIO(pq.content))
    assert str(back["target_id"].dtype) == "Int64"
    assert str(back["subject_id"].dtype) == "Int64"  # scan rows: <NA>, not float NaN
    assert back["subject_id"].isna().all()
    for col in ("value", "ci_low", "ci_high", "surrogate_z"):
        assert back[col].dtype == "float64", col  # all-missing is NaN, not a null column
    assert back["ci_low"].isna().all()
    assert isinstance(back["computed_at"].dtype, pd.DatetimeTZDtype)
    assert set(back["recipe"]) == {"default@1"}


@pytest.mark.parametrize("name", ["arena_id", "subject_id", "trial_id", "scan_id"])
def test_unknown_id_in_a_filter_is_404(study, name: str) -> None:  # noqa: F811
    client, _, _ = study
    for path in ("/v1/scores", "/v1/export/scores"):
        r = client.get(path, params={name: 987654})
        assert r.status_code == 404, (path, name, r.status_code)
