"""Stage the Android build: copy what the tablet needs (``schema/``, ``mobile/`` without this folder, and
``main.py``) into ``staging/`` beside ``buildozer.spec``; the camp server and the tests stay out.

    python mobile/android/stage.py && cd mobile/android && buildozer android debug
"""

from __future__ import annotations

import shutil
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
# the site set-up file is read on the camp server only (it needs PROJ and pycountry); tablets get the set-up by sync
SKIP = shutil.ignore_patterns("__pycache__", "*.pyc", "android", "benchmarks.py", "setup_file.py")


def stage(out: Path = HERE / "staging") -> Path:
    if out.exists():
        shutil.rmtree(out)
    out.mkdir(parents=True)
    for package in ("schema", "mobile"):
        shutil.copytree(ROOT / package, out / package, ignore=SKIP)
    shutil.copy(HERE / "main.py", out / "main.py")
    return out


if __name__ == "__main__":
    print(stage(Path(sys.argv[1]) if len(sys.argv) > 1 else HERE / "staging"))
