"""The site set-up file: every problem named with its line, key, value and fix; nothing half-read. Outside
checks: the fitted grid and the tablets' polynomial against pyproj on points not used in the fit; outline
validity against shapely's own test."""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from schema.errors import InputFileInvalid
from schema.setup_file import GridResidualsTooLarge, SetupFileInvalid, read_setup

# An invented site tied to WGS 84 / UTM zone 37S: grid = CRS rotated by 3.1 deg, scaled and shifted.
TIE = {"r": math.radians(3.1), "s": 0.99962, "tx": 170734.912, "ty": 9870233.204}


def _crs(e: float, n: float) -> tuple[float, float]:
    a, b = TIE["s"] * math.cos(TIE["r"]), TIE["s"] * math.sin(TIE["r"])
    return round(TIE["tx"] + a * e - b * n, 3), round(TIE["ty"] + b * e + a * n, 3)


CONTROL = [("MH1", 500.0, 1000.0, 50.0), ("MH2", 530.0, 1002.0, 49.8), ("MH3", 512.0, 1030.0, 50.4)]

GOOD = """\
control_points_csv = "control.csv"

[site]
code = "MHW"
name = "Marl Hollow"
crs_epsg = 32737
timezone = "Africa/Nairobi"
country_code = "KE"
z_tolerance_m = 0.02
shoring_check_depth_m = 1.5
number_block_size = 300
grid_tolerance_m = 0.02

[season]
label = "2027"
starts_on = 2027-06-14

[[control_point]]
code = "MH4"
e = 520.0
n = 1010.0
z = 51.2

[[trench]]
code = "A"
outline = [[502, 1004], [506, 1004], [506, 1008], [502, 1008]]

[[trench]]
code = "B"
outline = ["MH4", "MH2", "MH3"]
"""


def _control(rows: list[tuple[str, float, float, float]] = CONTROL) -> str:
    lines = ["code,e,n,z,crs_e,crs_n"]
    for code, e, n, z in rows:
        ce, cn = _crs(e, n)
        lines.append(f"{code},{e:.3f},{n:.3f},{z:.3f},{ce:.3f},{cn:.3f}")
    return "\n".join(lines) + "\n"


def write(tmp: Path, text: str = GOOD, control: str | None = None) -> Path:
    (tmp / "control.csv").write_text(_control() if control is None else control)
    path = tmp / "site.toml"
    path.write_text(text)
    return path


def problems(tmp: Path, text: str, control: str | None = None) -> list[str]:
    with pytest.raises(SetupFileInvalid) as exc:
        read_setup(write(tmp, text, control))
    assert str(exc.value).startswith(f"{tmp / 'site.toml'}: {len(exc.value.problems)} problem")
    return exc.value.problems


def test_a_good_file_gives_the_whole_set_up(tmp_path: Path) -> None:
    plan = read_setup(write(tmp_path))
    assert (plan.site.code, plan.site.crs_epsg, plan.site.country_code) == ("MHW", 32737, "KE")
    assert (plan.site.number_block_size, plan.site.shoring_check_depth_m) == (300, 1.5)
    assert [cp.code for cp in plan.control_points] == ["MH4", "MH1", "MH2", "MH3"]
    assert [t.code for t in plan.trenches] == ["A", "B"]
    assert plan.trenches[1].outline == [(520.0, 1010.0), (530.0, 1002.0), (512.0, 1030.0)]  # from the codes
    assert plan.trenches[0].seasons_opened == [plan.season.id]
    assert plan.site.grid is not None and plan.site.grid_polynomial is not None
    assert max(float(r["d"]) for r in plan.grid_fit.residuals) < 0.002  # the CRS values are rounded to 1 mm
    assert [type(r).__name__ for r in plan.records()] == ["Site", "Season", *["ControlPoint"] * 4, "Trench", "Trench"]


def test_grid_and_polynomial_agree_with_pyproj_on_points_not_in_the_fit(tmp_path: Path) -> None:
    """Outside check (pyproj, the PROJ library): control points made from WGS 84 positions projected by PROJ to
    UTM 37S; the fitted grid and the PROJ-free polynomial must put other WGS 84 positions where PROJ does."""
    import numpy as np
    import pyproj

    from schema.survey.grid import eval_grid_polynomial, grid_to_crs

    to_utm = pyproj.Transformer.from_crs(4326, 32737, always_xy=True)
    r, s, tx, ty = TIE["r"], TIE["s"], TIE["tx"], TIE["ty"]
    a, b = s * math.cos(r), s * math.sin(r)

    def grid_of(e: float, n: float) -> tuple[float, float]:  # inverse of the invented tie
        de, dn = e - tx, n - ty
        return ((a * de + b * dn) / (s * s), (-b * de + a * dn) / (s * s))

    lonlat = [(36.02, -1.17), (36.0235, -1.1712), (36.0218, -1.1681), (36.0241, -1.1690)]
    rows = []
    for i, (lon, lat) in enumerate(lonlat):
        e, n = to_utm.transform(lon, lat)
        x, y = grid_of(e, n)
        rows.append(f"P{i},{x:.4f},{y:.4f},50,{e:.4f},{n:.4f}")
    text = GOOD.replace('outline = ["MH4", "MH2", "MH3"]', 'outline = [[600, 1200], [604, 1200], [604, 1204]]')
    centre = grid_of(*to_utm.transform(36.022, -1.169))
    text = text.replace("[[502, 1004], [506, 1004], [506, 1008], [502, 1008]]",
                        f"[[{centre[0]:.1f}, {centre[1]:.1f}], [{centre[0] + 4:.1f}, {centre[1]:.1f}], "
                        f"[{centre[0] + 4:.1f}, {centre[1] + 4:.1f}]]")
    plan = read_setup(write(tmp_path, text, "code,e,n,z,crs_e,crs_n\n" + "\n".join(rows) + "\n"))
    check = [(36.0205, -1.1701), (36.0229, -1.1696), (36.0212, -1.1688)]  # not used in the fit
    for lon, lat in check:
        e, n = to_utm.transform(lon, lat)
        x, y = grid_of(e, n)
        ge, gn = grid_to_crs(plan.site.grid, [x], [y])
        assert abs(ge[0] - e) < 0.001 and abs(gn[0] - n) < 0.001
        px, py = eval_grid_polynomial(plan.site.grid_polynomial, [lat], [lon])
        assert np.hypot(px[0] - x, py[0] - y) < 0.001


@pytest.mark.parametrize(("change", "expected"), [
    (("crs_epsg = 32737", "crs_epsg = 4326"),
     "line 6, [site] crs_epsg: EPSG:4326 (WGS 84) is a geographic CRS, not a projected one; give the projected CRS "
     "the site is mapped in, e.g. the UTM zone of the site (32736 is WGS 84 / UTM zone 36S)"),
    (("crs_epsg = 32737", "crs_epsg = 4978"),
     "line 6, [site] crs_epsg: EPSG:4978 (WGS 84) is a geocentric CRS, not a projected one; give the projected CRS "
     "the site is mapped in, e.g. the UTM zone of the site (32736 is WGS 84 / UTM zone 36S)"),
    (("crs_epsg = 32737", "crs_epsg = 999999"),
     "line 6, [site] crs_epsg: EPSG code 999999 is not known to PROJ; give the EPSG code of the projected CRS your "
     "survey uses, e.g. 32736 for WGS 84 / UTM zone 36S"),
    (("timezone = \"Africa/Nairobi\"", "timezone = \"Africa/Narobi\""),
     "line 7, [site] timezone: time zone 'Africa/Narobi' is not known; give an IANA name such as 'Africa/Nairobi', "
     "or 'UTC'"),
    (("country_code = \"KE\"", "country_code = \"XK\""),
     "line 8, [site] country_code: 'XK' is not an ISO 3166-1 alpha-2 country code; give two capital letters such "
     "as 'KE' or 'ET'"),
    (("z_tolerance_m", "z_tolerence_m"),
     "line 9, [site] z_tolerence_m: unknown key 'z_tolerence_m'; did you mean z_tolerance_m?"),
])
def test_bad_site_values_are_named_with_line_key_and_fix(tmp_path: Path, change: tuple[str, str], expected: str) -> None:
    assert expected in problems(tmp_path, GOOD.replace(*change))


def test_a_missing_key_and_a_missing_table(tmp_path: Path) -> None:
    got = problems(tmp_path, GOOD.replace('name = "Marl Hollow"\n', ""))
    assert any(p.startswith("line 3, [site] name: ") and "required" in p.lower() for p in got), got
    got = problems(tmp_path, GOOD.replace("[season]", "[seasons]"))
    assert "top level seasons: unknown key 'seasons'; did you mean season?" in got[0]


def test_outlines_checked_with_shapely(tmp_path: Path) -> None:
    """Outside check: shapely's is_valid and explain_validity name the self-intersection."""
    from shapely import Polygon
    from shapely.validation import explain_validity

    bow = [[502, 1004], [506, 1008], [506, 1004], [502, 1008]]
    assert not Polygon(bow).is_valid
    got = problems(tmp_path, GOOD.replace("[[502, 1004], [506, 1004], [506, 1008], [502, 1008]]", str(bow)))
    assert got == [f"line 26, [[trench]] A outline: the outline is not a simple polygon ({explain_validity(Polygon(bow))}); "
                   "list the corners in order around the trench, without crossing edges"]
    got = problems(tmp_path, GOOD.replace("[[502, 1004], [506, 1004], [506, 1008], [502, 1008]]", "[[502, 1004], [506, 1004]]"))
    assert got == ["line 26, [[trench]] A outline: the outline has 2 distinct corners, so it does not close around an "
                   "area; list at least three corners in order around the trench"]


def test_overlapping_trenches_and_unknown_corner_codes(tmp_path: Path) -> None:
    got = problems(tmp_path, GOOD.replace('["MH4", "MH2", "MH3"]', "[[504, 1006], [510, 1006], [510, 1010], [504, 1010]]"))
    assert got == ["line 30, [[trench]] B outline: the outline overlaps trench A by 4.00 m2; trenches may touch but "
                   "not overlap: correct one of the two outlines"]
    got = problems(tmp_path, GOOD.replace('"MH4", "MH2"', '"MH9", "MH2"'))
    assert got == ["line 30, [[trench]] B outline: control point MH9 not defined; define it or give E, N corners"]


def test_a_control_point_far_from_the_others_is_named(tmp_path: Path) -> None:
    rows = _control().splitlines()
    code, e, n, z, ce, cn = rows[2].split(",")
    rows[2] = ",".join([code, e, n, z, str(float(ce) + 4000), cn])  # a slipped digit in MH2's easting
    got = problems(tmp_path, GOOD, "\n".join(rows) + "\n")
    assert got == ["line 1, top level control_points_csv: control point MH2: its CRS coordinates lie 3,993 m from where "
                   "its grid coordinates put it among the other control points; check crs_e and crs_n for a typo (or "
                   "a point from another zone)"]


def test_residuals_over_the_tolerance_are_refused_unless_accepted(tmp_path: Path) -> None:
    rows = _control().splitlines()
    code, e, n, z, ce, cn = rows[3].split(",")
    rows[3] = ",".join([code, e, n, z, f"{float(ce) + 0.09:.3f}", cn])  # 9 cm off: over 2 cm, not a far typo
    path = write(tmp_path, GOOD, "\n".join(rows) + "\n")
    with pytest.raises(GridResidualsTooLarge) as exc:
        read_setup(path)
    assert str(exc.value).startswith("the site grid fitted from the control points has a residual of 0.0")
    assert str(exc.value).endswith("check that point's grid and CRS coordinates, or accept the fit with --accept-residuals")
    plan = read_setup(path, accept_residuals=True)
    assert max(float(r["d"]) for r in plan.grid_fit.residuals) > 0.02


def test_bad_control_csv_and_bad_toml_and_no_file(tmp_path: Path) -> None:
    got = problems(tmp_path, GOOD, "code,e,n,z,crs_e,crs_n\nMH1,500,1000,fifty,1,2\n")
    assert got == [f"line 1, top level control_points_csv: {tmp_path / 'control.csv'} line 2: z 'fifty' is not a "
                   "number; use a decimal point, e.g. 12.345",
                   "line 30, [[trench]] B outline: control points MH2, MH3 not defined; define them or give E, N "
                   "corners"]  # every problem at once, not the first alone
    got = problems(tmp_path, GOOD.replace('code = "MHW"', 'code = "KRB'))
    assert got[0].startswith("not valid TOML: ") and "line 4" in got[0]
    with pytest.raises(InputFileInvalid, match="no such file; check the path"):
        read_setup(tmp_path / "nope.toml")
