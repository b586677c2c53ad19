"""Property-based tests of the whole REST API from its own OpenAPI schema (schemathesis).

Every operation gets a bounded number of generated requests (valid ones, and invalid ones that
break the schema on purpose), authenticated as an admin, on each backend. No answer may be a
server error (5xx) and every answer must match the response schema the operation documents.

The admin token gets a high id so that generated ``revoke_token`` calls (whose ids are drawn
near their lower bound) do not revoke it mid-run.
"""

from __future__ import annotations

from typing import Any

import pytest
import schemathesis
from api_support import parse_result, seed
from hypothesis import HealthCheck, Phase, given, settings
from hypothesis.errors import Unsatisfiable
from schemathesis import GenerationMode
from schemathesis.checks import not_a_server_error
from schemathesis.specs.openapi.checks import response_schema_conformance

from beamaudit.api.settings import load
from beamaudit.api.store import models as m
from beamaudit.api.store.auth import hash_token
from beamaudit.api.web.app import create_app

ADMIN_TOKEN = "bat_schemathesis-admin-token-for-tests-only"
ADMIN_TOKEN_ID = 987_654
#: generated requests per operation and generation mode (keeps the run well under a minute)
EXAMPLES = {GenerationMode.POSITIVE: 12, GenerationMode.NEGATIVE: 8}
CHECKS = [not_a_server_error, response_schema_conformance]


def _exercise(operation: Any, mode: GenerationMode, examples: int) -> None:
    @given(case=operation.as_strategy(generation_mode=mode))
    @settings(
        max_examples=examples,
        deadline=None,
        database=None,
        derandomize=True,
        phases=[Phase.explicit, Phase.generate],
        suppress_health_check=list(HealthCheck),
    )
    def run(case: Any) -> None:
        case.call_and_validate(headers={"Authorization": f"Bearer {ADMIN_TOKEN}"}, checks=CHECKS)

    run()


@pytest.mark.slow
def test_no_server_error_and_no_schema_violation(store: Any, tmp_path: Any) -> None:
    with store.session_factory.begin() as session:
        session.add(
            m.ApiToken(
                id=ADMIN_TOKEN_ID,
                name="schemathesis",
                role="admin",
                token_hash=hash_token(ADMIN_TOKEN),
            )
        )
    # some rows for generated ids to find (ids are drawn near 1)
    seed(
        store,
        [
            parse_result(f"1.2.9.{i}", study=f"1.2.9.{i}00", station=f"RAD{i % 2}")
            for i in range(1, 4)
        ],
    )
    app = create_app(
        load(database_url=store.url, secret_key_path=tmp_path / "pseudonym.key"),
        engine=store.engine,
    )
    schema = schemathesis.openapi.from_asgi("/api/v1/openapi.json", app)
    failures: list[str] = []
    operations = 0
    for result in schema.get_all_operations():
        operation = result.ok()
        operations += 1
        for mode, examples in EXAMPLES.items():
            try:
                _exercise(operation, mode, examples)
            except Unsatisfiable:
                # nothing of the operation can be made invalid (no parameters, no body)
                assert mode is GenerationMode.NEGATIVE, operation.label
            except Exception as exc:
                failures.append(f"{operation.label} [{mode.value}]: {type(exc).__name__}: {exc}")
    assert operations > 20
    assert not failures, "\n\n".join(failures)
