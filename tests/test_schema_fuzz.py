"""schemathesis against the app's own OpenAPI schema, with a valid admin token: no 5xx, and
every response that the schema documents matches it. In-process (ASGI), so no server is needed;
bounded by ``GAITSCAPE_SCHEMA_EXAMPLES`` examples per operation (default 5; CI sets 50)."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

import pytest

schemathesis = pytest.importorskip("schemathesis")
from hypothesis import HealthCheck, settings  # noqa: E402
from schemathesis.checks import not_a_server_error  # noqa: E402
from schemathesis.specs.openapi.checks import response_schema_conformance  # noqa: E402

from service.app import create_app  # noqa: E402
from service.settings import get_settings  # noqa: E402
from storage import repo  # noqa: E402

pytestmark = pytest.mark.slow  # ~20 s at 5 examples per operation (coverage phase included)
EXAMPLES = int(os.environ.get("GAITSCAPE_SCHEMA_EXAMPLES", "5"))
_DATA = Path(tempfile.mkdtemp(prefix="gaitscape-schema-fuzz-"))
# Bulk generated requests fail authentication now and then (a revoked admin token, a bogus
# header): lift the limiter so it does not turn the run into a stream of 429s.
APP = create_app(get_settings(data_dir=_DATA, auth_failure_limit=1_000_000, job_runner=False))
with APP.state.sessionmaker() as _session:
    _arena = repo.create_arena(session=_session, name="seed board", kind="runway")


def _homogeneous_tuples_as_items(node):
    """``prefixItems`` of equal members -> ``items`` with min/max length (the same set of
    documents): the schemathesis release used here cannot validate responses against
    ``prefixItems`` (schemathesis issue 3842 and follow-ups); pydantic emits it for tuples."""
    if isinstance(node, dict):
        out = {k: _homogeneous_tuples_as_items(v) for k, v in node.items()}
        prefix = out.get("prefixItems")
        if isinstance(prefix, list) and prefix and all(p == prefix[0] for p in prefix):
            del out["prefixItems"]
            out["items"] = prefix[0]
            out.setdefault("minItems", len(prefix))
            out.setdefault("maxItems", len(prefix))
        return out
    if isinstance(node, list):
        return [_homogeneous_tuples_as_items(v) for v in node]
    return node


schema = schemathesis.openapi.from_dict(_homogeneous_tuples_as_items(APP.openapi()))
schema.app = APP
schema.location = "/openapi.json"
CALLS = {"n": 0, "5xx": 0}


def _admin_header() -> dict[str, str]:
    # A fresh token per call: a generated DELETE /v1/tokens/{id} may revoke an earlier one.
    with APP.state.sessionmaker() as session:
        _, secret = repo.create_token(session=session, scopes=["admin"], label="schema fuzz")
    return {"Authorization": f"Bearer {secret}"}


@schema.parametrize()
@settings(
    max_examples=EXAMPLES,
    deadline=None,
    database=None,
    derandomize=True,
    suppress_health_check=list(HealthCheck),
)
def test_api_conforms(case) -> None:
    CALLS["n"] += 1
    case.call_and_validate(
        headers=_admin_header(), checks=[not_a_server_error, response_schema_conformance]
    )


def test_zz_report_calls(capsys: pytest.CaptureFixture[str]) -> None:
    with capsys.disabled():
        print(f"\nschema fuzz requests: {CALLS['n']}")
