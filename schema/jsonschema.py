"""JSON Schema files for every record, generated from the models into ``schema/json/``.

    python -m schema.jsonschema           # rewrite the files
    python -m schema.jsonschema --check   # exit 1 if any file is stale (the test suite runs this check)
"""

from __future__ import annotations

import json
import sys
from pathlib import Path

from .records import REGISTRY

__all__ = ["JSON_DIR", "generate", "stale", "write"]

JSON_DIR = Path(__file__).parent / "json"
_BASE = "https://baulk.invalid/schema/"


def generate() -> dict[str, str]:
    """File name -> JSON text for every record (stored shape) and its create and update shapes."""
    out: dict[str, str] = {}
    for name, spec in REGISTRY.items():
        for suffix, model in (("", spec.public), (".create", spec.create), (".update", spec.update)):
            doc = model.model_json_schema()
            doc = {"$schema": "https://json-schema.org/draft/2020-12/schema", "$id": f"{_BASE}{name}{suffix}.json", **doc}
            out[f"{name}{suffix}.json"] = json.dumps(doc, indent=2, sort_keys=True) + "\n"
    return out


def stale(directory: Path = JSON_DIR) -> list[str]:
    """Names of files that are missing, different or no longer generated."""
    wanted = generate()
    present = {p.name for p in directory.glob("*.json")}
    bad = [n for n, text in wanted.items() if not (directory / n).exists() or (directory / n).read_text() != text]
    return sorted(bad + sorted(present - set(wanted)))


def write(directory: Path = JSON_DIR) -> list[str]:
    """Rewrite every file and remove ones no longer generated; returns the names written."""
    directory.mkdir(parents=True, exist_ok=True)
    wanted = generate()
    for p in directory.glob("*.json"):
        if p.name not in wanted:
            p.unlink()
    for n, text in wanted.items():
        (directory / n).write_text(text)
    return sorted(wanted)


def main(argv: list[str]) -> int:
    if "--check" in argv:
        bad = stale()
        if bad:
            print(f"stale JSON Schema files: {', '.join(bad)}; run: python -m schema.jsonschema", file=sys.stderr)
            return 1
        print("JSON Schema files are up to date")
        return 0
    names = write()
    print(f"wrote {len(names)} files to {JSON_DIR}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
