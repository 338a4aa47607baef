"""The exported GeoPackage opened by GDAL's own ``ogrinfo`` from Debian's gdal-bin (GDAL 3.6 on bookworm, the
oldest GDAL the export promises to serve): no warning, the layers and fields a GIS needs to style finds without a
join, unit codes on level points and the vertical reference in the layer metadata."""

from __future__ import annotations

import csv
import datetime as dt
import os
import re
import shutil
import subprocess
from pathlib import Path

import pytest
from click.testing import CliRunner

from sync_server.cli import cli


def _ogrinfo() -> str:
    path = shutil.which("ogrinfo")
    if path is None:
        msg = "no ogrinfo: install Debian's gdal-bin (.ci/run does)"
        if os.environ.get("CI") == "true":
            pytest.fail(msg)
        pytest.skip(msg)
    return path


@pytest.fixture(scope="module")
def gpkg(demo_out: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    db = tmp_path_factory.mktemp("gpkg") / "server.sqlite"
    shutil.copy(demo_out / "server.sqlite", db)
    out = db.parent / "export"
    r = CliRunner().invoke(cli, ["export", "--out", str(out), "--db", f"sqlite:///{db}"])
    assert r.exit_code == 0, r.output
    return out / "finds.gpkg"


def _run(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([_ogrinfo(), *args], capture_output=True, text=True, timeout=120, check=False)


def test_ogrinfo_reads_every_layer_without_a_warning(gpkg: Path) -> None:
    version = _run("--version").stdout
    assert version.startswith("GDAL 3."), version
    r = _run("-ro", "-so", "-al", str(gpkg))
    assert r.returncode == 0, r.stderr
    # GDAL prints "Warning 1: ..." on stderr for a GeoPackage version it only partly supports (1.4 under GDAL 3.6)
    assert "Warning" not in r.stderr and "ERROR" not in r.stderr, r.stderr
    out = r.stdout
    for layer, geometry in (("finds", "3D Point"), ("trenches", "Polygon"), ("level_points", "3D Point")):
        assert f"Layer name: {layer}\n" in out
        block = out.split(f"Layer name: {layer}\n", 1)[1].split("Layer name:", 1)[0]
        assert f"Geometry: {geometry}\n" in block
        assert 'ID["EPSG",32736]' in block  # the demo site's CRS, UTM zone 36S
    finds_block = out.split("Layer name: finds\n", 1)[1].split("Layer name:", 1)[0]
    for field in ("trench", "unit", "horizon", "taxon", "element", "season", "category", "material", "recovery"):
        assert f"\n{field}: String" in finds_block, field
    assert "\nfound_on: Date" in finds_block  # a GeoPackage DATE column (OGC 12-128r18, table 1), not text
    assert "VERTICAL_REFERENCE=Z: site datum heights (m). CRS height = Z + 1187.42 m" in finds_block
    levels_block = out.split("Layer name: level_points\n", 1)[1]
    assert "\nunit: String" in levels_block and "VERTICAL_REFERENCE=" in levels_block


def test_a_find_reads_back_with_its_horizon_and_date(gpkg: Path) -> None:
    with (gpkg.parent / "finds.csv").open(newline="") as fh:
        finds = [r for r in csv.DictReader(fh) if r["e"] and r["horizon"] and r["category"] == "fossil"]
    f = finds[0]
    r = _run("-ro", "-q", "-where", f"number = {int(f['number'])}", str(gpkg), "finds")
    assert r.returncode == 0 and "Warning" not in r.stderr, r.stderr
    out = r.stdout
    assert f"horizon (String) = {f['horizon']}\n" in out
    assert f"unit (String) = {f['unit']}\n" in out and f"trench (String) = {f['trench']}\n" in out
    assert f"taxon (String) = {f['taxon']}\n" in out and "season (String) = 2026\n" in out
    # GDAL prints an OFTDate as YYYY/MM/DD (ogrinfo output); the day is the find's UTC time in the site's zone
    day = re.search(r"found_on \(Date\) = (\d{4})/(\d\d)/(\d\d)\n", out)
    assert day, out
    found_at = dt.datetime.fromisoformat(f["found_at"].replace("Z", "+00:00"))
    assert abs((dt.date(*map(int, day.groups())) - found_at.date()).days) <= 1


def test_level_points_carry_unit_codes(gpkg: Path) -> None:
    r = _run("-ro", "-q", "-sql", "SELECT DISTINCT unit FROM level_points", str(gpkg))
    assert r.returncode == 0 and "Warning" not in r.stderr, r.stderr
    codes = {line.split("=", 1)[1].strip() for line in r.stdout.splitlines() if line.strip().startswith("unit (")}
    with (gpkg.parent / "volumes.csv").open(newline="") as fh:
        units = {row["unit"] for row in csv.DictReader(fh)}
    assert codes and codes <= units  # codes such as 104, not bare ids
