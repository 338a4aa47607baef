"""The package boundaries of DESIGN.md section 1, checked on the source."""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def _imports(package: str) -> dict[str, set[str]]:
    found: dict[str, set[str]] = {}
    for path in (ROOT / package).rglob("*.py"):
        names: set[str] = set()
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.Import):
                names |= {a.name.split(".")[0] for a in node.names}
            elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
                names.add(node.module.split(".")[0])
        found[str(path.relative_to(ROOT))] = names
    return found


@pytest.mark.parametrize(
    ("package", "forbidden", "allowed_in"),
    [
        ("schema", {"kivy", "fastapi", "starlette", "httpx", "uvicorn", "mobile", "sync_server"}, set()),
        ("mobile", {"sync_server", "fastapi", "uvicorn"}, set()),
        # only the command modules (the bundle group works on tablet files) and the demo may drive the tablet code
        ("sync_server", {"mobile", "kivy"}, {"sync_server/cli.py", "sync_server/cli_bundle.py", "sync_server/demo.py"}),
    ],
)
def test_boundaries(package: str, forbidden: set[str], allowed_in: set[str]) -> None:
    """Where each package may reach."""
    bad = {f: sorted(n & forbidden) for f, n in _imports(package).items() if n & forbidden and f not in allowed_in}
    assert bad == {}


def test_only_the_screens_import_kivy() -> None:
    """Controllers, the store, instruments and labels run with no Kivy (they are tested without a window)."""
    screens = {f for f in _imports("mobile") if f.startswith("mobile/ui/")}
    bad = {f: sorted(n & {"kivy"}) for f, n in _imports("mobile").items() if "kivy" in n and f not in screens}
    assert screens and bad == {}


def test_public_api_is_complete() -> None:
    import importlib

    for name in ("schema", "schema.records", "schema.errors", "schema.db", "schema.vocab", "mobile"):
        module = importlib.import_module(name)
        missing = [n for n in module.__all__ if not hasattr(module, n)]
        assert missing == [], f"{name}.__all__ names what it does not define"
