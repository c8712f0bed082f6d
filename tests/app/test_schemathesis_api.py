"""schemathesis against the app's own OpenAPI document, in process (ASGI), as each role.

For every operation, valid-by-schema and invalid-by-schema requests are generated (a bounded
number of each) and sent with the role's session cookie and CSRF header. Checks: no 5xx; the
status code is one the operation documents; the body matches the documented schema and media
type; a request that breaks the schema is refused with a 4xx.

Three things keep the roles' own accounts usable through a run: a PATCH of a user aims at a
spare account instead of the caller's or another role's, and training requests are left to
the permission matrix (they would start real jobs).
"""

from __future__ import annotations

from typing import Any

import pytest
import schemathesis
from hypothesis import HealthCheck, Phase, given
from hypothesis import settings as hsettings
from hypothesis.errors import Unsatisfiable
from schemathesis import GenerationMode
from schemathesis.checks import (
    content_type_conformance,
    negative_data_rejection,
    not_a_server_error,
    response_schema_conformance,
    status_code_conformance,
)
from schemathesis.python.asgi import shutdown_lifespans

from app.models import GrammarVersion, User
from app.security import SESSION_COOKIE
from tests.app.bench_helpers import assign, make_corpus
from tests.app.conftest import PASSWORD_HASH

# Examples per operation and role: valid-by-schema, then schema-breaking. Anonymous callers
# are refused before anything is read, so a few show that.
EXAMPLES = {GenerationMode.POSITIVE: 10, GenerationMode.NEGATIVE: 6}
ANONYMOUS_EXAMPLES = 3
SKIP = {("POST", "/api/grammars")}  # would start training jobs; the matrix covers its access


@pytest.fixture
def world(db, people) -> dict[str, Any]:
    corpus, sentences = make_corpus(db)
    assign(db, sentences[:2], people.ann1, people.ann2)
    spare = User(
        username="spare", display_name="Spare", role="annotator", password_hash=PASSWORD_HASH
    )
    db.add_all([spare, GrammarVersion(corpus_id=corpus.id, number=1, status="failed")])
    db.commit()
    return {
        "spare": spare.id,
        "roles": {people.admin.id, people.adjudicator.id, people.ann1.id, people.ann2.id},
    }


def _run_operation(
    operation: Any, mode: GenerationMode, auth: dict[str, Any], world: dict[str, Any], examples: int
) -> None:
    checks = [
        not_a_server_error,
        status_code_conformance,
        content_type_conformance,
        response_schema_conformance,
    ]
    if mode == GenerationMode.NEGATIVE:
        checks.append(negative_data_rejection)

    @hsettings(
        max_examples=examples,
        deadline=None,
        database=None,
        derandomize=True,
        phases=[Phase.explicit, Phase.generate],
        suppress_health_check=list(HealthCheck),
    )
    @given(case=operation.as_strategy(generation_mode=mode))
    def run(case: Any) -> None:
        params = case.path_parameters or {}
        if "user_id" in params and params["user_id"] in world["roles"]:
            params["user_id"] = world["spare"]
        response = case.call(headers=auth["headers"], cookies=auth["cookies"])
        case.validate_response(response, checks=checks, headers=auth["headers"])

    run()


@pytest.mark.slow
@pytest.mark.parametrize("role", ["anonymous", "ann1", "adj", "admin"])
def test_schemathesis_every_operation_as(role, app, login, world) -> None:
    auth: dict[str, Any] = {"headers": {}, "cookies": {}}
    if role != "anonymous":
        me = login(role)
        auth = {
            "headers": {"X-CSRF-Token": me.csrf},
            "cookies": {SESSION_COOKIE: me.client.cookies.get(SESSION_COOKIE)},
        }
    schema = schemathesis.openapi.from_asgi("/openapi.json", app)
    failures: list[str] = []
    count = 0
    try:
        for result in schema.get_all_operations():
            operation = result.ok()
            if (operation.method.upper(), operation.path) in SKIP:
                continue
            count += 1
            for mode in (GenerationMode.POSITIVE, GenerationMode.NEGATIVE):
                try:
                    _run_operation(
                        operation,
                        mode,
                        auth,
                        world,
                        ANONYMOUS_EXAMPLES if role == "anonymous" else EXAMPLES[mode],
                    )
                except Unsatisfiable:
                    continue  # nothing to break: the operation has no parameters or body
                except (Exception, BaseExceptionGroup) as exc:  # collect them all, then report
                    failures.append(
                        f"{operation.method.upper()} {operation.path} "
                        f"[{mode.value}] as {role}: {str(exc)[:1500]}"
                    )
    finally:
        shutdown_lifespans()
    assert count >= 20, f"only {count} operations in the schema"
    assert not failures, "\n\n".join(failures)
