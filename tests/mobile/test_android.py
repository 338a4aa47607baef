"""The Android build's inputs: the staged folder holds the tablet's code and no server code, and every package
the staged code imports is in buildozer.spec's requirements (pyproj only behind the no-PROJ fallback)."""

from __future__ import annotations

import ast
import configparser
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
# import name -> python-for-android requirement name
DIST = {"pydantic_settings": "pydantic-settings", "pydantic_core": "pydantic-core", "typing_extensions": "typing-extensions",
        "PIL": "pillow"}  # Pillow installs as the module PIL


def test_staged_build_imports_only_what_the_spec_requires(tmp_path: Path) -> None:
    sys.path.insert(0, str(ROOT / "mobile" / "android"))
    try:
        import stage
    finally:
        sys.path.pop(0)
    out = stage.stage(tmp_path / "staging")
    files = {p.relative_to(out).as_posix() for p in out.rglob("*") if p.is_file()}
    assert {"main.py", "mobile/ui/app.kv", "mobile/ui/screens/record.kv", "schema/json/find.json"} <= files
    assert not any(f.startswith(("sync_server/", "tests/", "mobile/android/")) for f in files)

    spec = configparser.ConfigParser()
    spec.read(ROOT / "mobile" / "android" / "buildozer.spec")
    required = {r.split("==")[0].strip() for r in spec["app"]["requirements"].split(",")}
    assert "pyproj" not in required

    top_level, lazy = set(), set()
    for path in out.rglob("*.py"):
        tree = ast.parse(path.read_text())
        for node in ast.walk(tree):
            names = ([a.name for a in node.names] if isinstance(node, ast.Import)
                     else [node.module] if isinstance(node, ast.ImportFrom) and node.module and node.level == 0 else [])
            for name in names:
                root = name.split(".")[0]
                (top_level if node.col_offset == 0 else lazy).add(root)
    third_party = {n for n in top_level | lazy if n not in sys.stdlib_module_names and n not in ("schema", "mobile")}
    missing = {n for n in third_party if DIST.get(n, n) not in required}
    # pyproj is imported only inside functions behind have_proj(); scipy/pandas/etc. never
    assert missing == {"pyproj"} and "pyproj" not in top_level
