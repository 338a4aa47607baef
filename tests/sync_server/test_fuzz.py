"""schemathesis over the served OpenAPI schema, with a recorder's token and with a manager's: no server error,
no response outside the schema, whatever the input."""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

import pytest

schemathesis = pytest.importorskip("schemathesis", reason="the API fuzzing needs schemathesis (in the test extra)")

from hypothesis import HealthCheck, settings  # noqa: E402

from sync_server.app import create_app  # noqa: E402
from tests.helpers import seeded_server  # noqa: E402

_server, _demo = seeded_server(f"sqlite:///{Path(tempfile.mkdtemp(prefix='baulk-fuzz-')) / 'server.sqlite'}")
APP = create_app(store=_server)
TOKENS = {role: _server.add_device(label=f"FUZZ-{role}", role=role)[1] for role in ("recorder", "manager")}
schema = schemathesis.openapi.from_asgi("/openapi.json", APP)
# photo chunks (tus): their bodies are raw bytes, sent as application/octet-stream would be
schemathesis.serializer.alias("application/offset+octet-stream", "application/octet-stream")
FUZZ = settings(max_examples=60 if os.environ.get("CI") == "true" else 25, deadline=None,
                suppress_health_check=list(HealthCheck))


@pytest.mark.slow
@schema.parametrize()
@FUZZ
def test_fuzz_with_a_recorder_token(case) -> None:  # type: ignore[no-untyped-def]
    case.call_and_validate(headers={"Authorization": f"Bearer {TOKENS['recorder']}"})


@pytest.mark.slow
@schema.parametrize()
@FUZZ
def test_fuzz_with_a_manager_token(case) -> None:  # type: ignore[no-untyped-def]
    case.call_and_validate(headers={"Authorization": f"Bearer {TOKENS['manager']}"})
