"""The OpenAPI document matches the server: fuzzed with schemathesis against the live server.

Every operation of /openapi.json gets a fixed number of generated requests (derandomized, so
CI sees the same ones each run), sent with a real token; every answer must be no 5xx
(`not_a_server_error`) and a status the document lists for that operation
(`status_code_conformance`). A wall-clock budget bounds the whole run: past it, the remaining
examples are not sent, and the test still requires every operation to have been called.
"""

from __future__ import annotations

import time
from typing import Any

import schemathesis
from hypothesis import HealthCheck, given, settings
from schemathesis.checks import not_a_server_error
from schemathesis.specs.openapi.checks import status_code_conformance

from .server import Server

EXAMPLES_PER_OPERATION = 25
BUDGET_SECONDS = 90.0


def test_every_operation_answers_as_documented(server: Server) -> None:
    token = server.token("fuzzers", scopes=("submit", "read"))
    headers = {"Authorization": f"Bearer {token}"}
    schema = schemathesis.openapi.from_url(f"{server.base_url}/openapi.json")
    started = time.monotonic()
    called: dict[str, int] = {}
    failures: list[str] = []
    operations = [result.ok() for result in schema.get_all_operations()]
    assert len(operations) >= 20, [op.label for op in operations]

    def fuzzer(operation: Any) -> Any:
        label = operation.label
        called[label] = 0

        @given(case=operation.as_strategy())
        @settings(
            max_examples=EXAMPLES_PER_OPERATION,
            derandomize=True,
            deadline=None,
            database=None,
            suppress_health_check=list(HealthCheck),
        )
        def fuzz(case: Any) -> None:
            # the first example of each operation always runs, so every one is checked
            if called[label] and time.monotonic() - started > BUDGET_SECONDS:
                return
            called[label] += 1
            case.call_and_validate(
                base_url=server.base_url,
                headers=headers,
                checks=[not_a_server_error, status_code_conformance],
            )

        return fuzz

    for operation in operations:
        try:
            fuzzer(operation)()
        except Exception as exc:  # collect every operation's failure, then report them all
            failures.append(f"{operation.label}: {str(exc)[:1500]}")
    print(
        f"fuzzed {sum(called.values())} requests over {len(called)} operations "
        f"in {time.monotonic() - started:.0f} s"
    )
    assert not failures, "\n\n".join(failures)
    assert all(count > 0 for count in called.values()), called
    with server.client() as client:
        assert client.get("/healthz").status_code == 200
