"""The site set-up file: one human-edited TOML file that starts a real excavation.

``read_setup(path)`` checks the whole file before anything is written and returns a ``SetupPlan`` (the site, its
first season, control points and trenches as records, with the site grid fitted from the control points known
in both systems and the PROJ-free tablet polynomial). Every problem found is reported at once, each with the
file's line, the table and key, the bad value and the fix. The file looks like this (README: "Your own site")::

    control_points_csv = "control.csv"   # optional: code,e,n,z[,crs_e,crs_n]; relative to this file

    [site]
    code = "MHW"
    name = "Marl Hollow"
    crs_epsg = 32637                # a projected CRS
    timezone = "Africa/Nairobi"
    country_code = "KE"             # ISO 3166-1 alpha-2
    z_tolerance_m = 0.02
    shoring_check_depth_m = 1.2     # set it to your local rule
    number_block_size = 300
    grid_tolerance_m = 0.02         # largest grid-fit residual accepted

    [season]
    label = "2027"
    starts_on = 2027-06-14

    [[control_point]]
    code = "MH1"
    e = 500.000
    n = 1000.000
    z = 50.000
    crs_e = 171234.567
    crs_n = 9871234.567

    [[trench]]
    code = "A"
    outline = [[502, 1004], [506, 1004], [506, 1008], [502, 1008]]   # grid E, N; or control-point codes

Pure apart from reading the files; pyproj (CRS checks, the polynomial) and pycountry (ISO 3166-1) are used
only when present, as DESIGN.md section 4.3 asks of every PROJ use.
"""

from __future__ import annotations

import difflib
import math
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .errors import InputFileInvalid, SurveyError, WeakGeometry
from .records import ControlPoint, GridPolynomial, GridTransform, Season, Site, Trench
from .records.site import SiteBase
from .validation import check

__all__ = [
    "GridResidualsTooLarge", "SetupFileInvalid", "SetupPlan", "check_outlines", "fit_site_grid", "parse_outline",
    "read_control_csv", "read_setup",
]

SITE_KEYS = tuple(k for k in SiteBase.model_fields if k not in ("grid", "grid_polynomial"))
SEASON_KEYS = ("label", "starts_on", "ends_on")
CONTROL_KEYS = ("code", "e", "n", "z", "crs_e", "crs_n")
TRENCH_KEYS = ("code", "outline")
TOP_KEYS = ("control_points_csv", "site", "season", "control_point", "trench")
FAR_M = 100.0  # a control point whose CRS position disagrees with its grid position by more than this is a typo


class SetupFileInvalid(InputFileInvalid):
    """A set-up file with a missing, misspelt or wrong value; nothing was written."""

    def __init__(self, path: Path | str, problems: list[str]):
        self.problems = problems
        head = f"{path}: {len(problems)} problem{'s' if len(problems) > 1 else ''}, nothing was written"
        super().__init__(head + "\n" + "\n".join(f"  - {p}" for p in problems))


class GridResidualsTooLarge(SurveyError):
    """The site grid fitted from the control points has a residual over the site's tolerance."""


@dataclass
class SetupPlan:
    """Everything ``baulk site init`` writes, checked, with the fits it made."""

    site: Site
    season: Season
    control_points: list[ControlPoint]
    trenches: list[Trench]
    grid_fit: Any = None  # schema.survey.grid.GridFit
    polynomial: GridPolynomial | None = None
    warnings: list[str] = field(default_factory=list)

    def records(self) -> list[Any]:
        """Parents first: the order a store needs."""
        return [self.site, self.season, *self.control_points, *self.trenches]


# -- where a key is in the file -------------------------------------------------------------------------------
_HEADER = re.compile(r"^\s*(\[\[?)\s*([A-Za-z0-9_.\-]+)\s*\]\]?")


def _line_of(text: str, table: str | None, index: int, key: str | None) -> int | None:
    """The line of ``key`` in the ``index``-th ``[table]`` / ``[[table]]`` (top level when table is None)."""
    current, seen = None, {}
    found_header = None
    for number, line in enumerate(text.splitlines(), start=1):
        m = _HEADER.match(line)
        if m:
            current = m.group(2)
            seen[current] = seen.get(current, -1) + 1
            if current == table and seen[current] == index:
                found_header = number
            continue
        if current == table and (table is None or seen.get(table) == index):
            if key and re.match(rf"^\s*{re.escape(key)}\s*=", line):
                return number
    return found_header


class _Problems:
    def __init__(self, text: str):
        self.text, self.items = text, []  # type: ignore[var-annotated]

    def add(self, table: str | None, index: int, key: str | None, message: str, *, label: str | None = None) -> None:
        line = _line_of(self.text, table, index, key)
        where = f"line {line}, " if line else ""
        place = "top level" if table is None else (f"[[{table}]] {label}" if label else f"[{table}]")
        self.items.append(f"{where}{place}" + (f" {key}" if key else "") + f": {message}")

    def unknown_keys(self, table: str | None, index: int, given: dict[str, Any], allowed: tuple[str, ...],
                     label: str | None = None) -> None:
        for key in given:
            if key not in allowed:
                close = difflib.get_close_matches(key, allowed, n=1)
                hint = f"did you mean {close[0]}?" if close else f"the keys here are {', '.join(allowed)}"
                self.add(table, index, key, f"unknown key {key!r}; {hint}", label=label)

    def model(self, table: str, index: int, exc: Any, label: str | None = None) -> None:
        for p in exc.problems:
            self.add(table, index, p.field, f"{p.message}; {p.fix}", label=label)


# -- pieces reused by the day-to-day commands ----------------------------------------------------------------
def parse_outline(value: Any, control: dict[str, ControlPoint]) -> list[tuple[float, float]]:
    """An outline as [[E, N], ...] or as control-point codes; ValueError with the fix when neither."""
    if not isinstance(value, list) or not value:
        raise ValueError("give the outline as a list of [E, N] corners or of control-point codes")
    if all(isinstance(v, str) for v in value):
        missing = [v for v in value if v not in control]
        if missing:
            raise ValueError(f"control point{'s' if len(missing) > 1 else ''} {', '.join(missing)} "
                             f"not defined; define {'them' if len(missing) > 1 else 'it'} or give E, N corners")
        return [(control[v].e, control[v].n) for v in value]
    ring = []
    for v in value:
        if (not isinstance(v, (list, tuple)) or len(v) != 2
                or not all(isinstance(c, (int, float)) and not isinstance(c, bool) and math.isfinite(c) for c in v)):
            raise ValueError(f"corner {v!r} is not [E, N] in metres; write each corner as [E, N]")
        ring.append((float(v[0]), float(v[1])))
    return ring


def _open_ring(ring: list[tuple[float, float]]) -> list[tuple[float, float]]:
    return ring[:-1] if len(ring) > 3 and ring[0] == ring[-1] else ring


def outline_problem(ring: list[tuple[float, float]]) -> str | None:
    """Why an outline is not a valid trench polygon (shapely's validity test and its explanation), or None."""
    from shapely import Polygon
    from shapely.validation import explain_validity

    ring = _open_ring(ring)
    if len(set(ring)) < 3:
        return (f"the outline has {len(set(ring))} distinct corner{'s' if len(set(ring)) != 1 else ''}, so it "
                "does not close around an area; list at least three corners in order around the trench")
    poly = Polygon(ring)
    if not poly.is_valid:
        return (f"the outline is not a simple polygon ({explain_validity(poly)}); list the corners in order "
                "around the trench, without crossing edges")
    if poly.area < 1e-4:
        return "the outline encloses no area; list the corners in order around the trench"
    return None


def check_outlines(rings: dict[str, list[tuple[float, float]]]) -> list[tuple[str, str]]:
    """(trench code, problem) for each invalid outline and each pair of trenches that overlap."""
    import numpy as np
    import shapely

    problems = [(code, p) for code, ring in rings.items() if (p := outline_problem(ring))]
    bad = {c for c, _ in problems}
    codes = [c for c in rings if c not in bad]
    polys = np.array([shapely.Polygon(_open_ring(rings[c])) for c in codes], dtype=object)
    if len(polys) > 1:
        tree = shapely.STRtree(polys)
        left, right = tree.query(polys, predicate="intersects")  # vectorised: every candidate pair at once
        for i, j in zip(left.tolist(), right.tolist()):
            if i < j:
                area = shapely.area(shapely.intersection(polys[i], polys[j]))
                if area > 1e-6:
                    problems.append((codes[j], f"the outline overlaps trench {codes[i]} by {area:.2f} m2; trenches "
                                               "may touch but not overlap: correct one of the two outlines"))
    return problems


def read_control_csv(path: Path) -> list[dict[str, Any]]:
    """Control points from a CSV ``code,e,n,z[,crs_e,crs_n]``, with errors naming the line and column."""
    from .tabular import read_csv

    rows = read_csv(path, required=("code", "e", "n", "z"), numeric=("e", "n", "z", "crs_e", "crs_n"),
                    optional={"crs_e": None, "crs_n": None})
    return [{k: r[k] for k in CONTROL_KEYS} | {"_line": r["_line"]} for r in rows]


def fit_site_grid(site: Site, control: list[ControlPoint], *, centre: tuple[float, float] | None,
                  accept_residuals: bool = False) -> tuple[Site, Any, GridPolynomial | None, list[str]]:
    """The site with its grid fitted from the control points known in both systems, and the PROJ-free
    polynomial around ``centre``; refused over ``site.grid_tolerance_m`` unless ``accept_residuals``."""
    from .survey.crs import have_proj
    from .survey.grid import PointPair, fit_grid, fit_grid_polynomial

    pairs = [PointPair(cp.code, cp.e, cp.n, cp.crs_e, cp.crs_n) for cp in control
             if cp.crs_e is not None and cp.crs_n is not None]
    if len(pairs) < 2:
        return site.model_copy(update={"grid": None, "grid_polynomial": None}), None, None, [
            f"{len(pairs)} control point{'' if len(pairs) == 1 else 's'} known in both systems: no site grid fitted, "
            "so GNSS positions cannot be put on the site grid; give crs_e, crs_n for at least two (better three)"]
    fit = fit_grid(pairs)
    worst = max(fit.residuals, key=lambda r: float(r["d"]))
    if float(worst["d"]) > site.grid_tolerance_m and not accept_residuals:
        lines = ", ".join(f"{r['point']} {float(r['d']):.3f} m" for r in fit.residuals)
        raise GridResidualsTooLarge(
            f"the site grid fitted from the control points has a residual of {float(worst['d']):.3f} m at "
            f"{worst['point']}, over the tolerance of {site.grid_tolerance_m:g} m (residuals: {lines}); check that "
            "point's grid and CRS coordinates, or accept the fit with --accept-residuals")
    grid = GridTransform(**fit.as_grid_transform())
    poly = None
    warnings = list(fit.warnings)
    if have_proj() and centre is not None:
        poly = fit_grid_polynomial(grid=grid, crs=site.crs_epsg, centre_x=centre[0], centre_y=centre[1])
        poly = GridPolynomial.model_validate(poly.model_dump())
    elif centre is not None:
        warnings.append("no PROJ on this machine: the tablets' grid polynomial was not fitted")
    return site.model_copy(update={"grid": grid, "grid_polynomial": poly}), fit, poly, warnings


def far_control_points(control: list[ControlPoint]) -> list[tuple[str, float]]:
    """Control points whose CRS position disagrees with their grid position, judged against the others:
    (code, disagreement in metres) for each over ``FAR_M`` (a typo in crs_e/crs_n, a point from another zone)."""
    import numpy as np

    both = [cp for cp in control if cp.crs_e is not None and cp.crs_n is not None]
    if len(both) < 3:
        return []
    grid = np.array([[cp.e, cp.n] for cp in both])
    crs = np.array([[cp.crs_e, cp.crs_n] for cp in both], dtype=float)
    out = []
    for i, cp in enumerate(both):
        others = np.arange(len(both)) != i
        d_grid = np.hypot(*(grid[others] - grid[i]).T)
        d_crs = np.hypot(*(crs[others] - crs[i]).T)
        # a point's distances to the others are the same in both systems up to the scale (ppm) of the CRS
        off = float(np.median(np.abs(d_crs - d_grid)))
        if off > FAR_M:
            out.append((cp.code, off))
    if len(out) == len(both):  # everything disagrees: the worst one is the likely typo
        out = [max(out, key=lambda t: t[1])]
    return out


def crs_problem(epsg: int) -> str | None:
    """Why ``epsg`` cannot be a site's CRS (unknown to PROJ, geographic, geocentric...), or None."""
    from .survey.crs import have_proj

    if not have_proj():
        return None
    import pyproj

    try:
        crs = pyproj.CRS.from_epsg(epsg)
    except pyproj.exceptions.CRSError:
        return (f"EPSG code {epsg} is not known to PROJ; give the EPSG code of the projected CRS your survey uses, "
                "e.g. 32736 for WGS 84 / UTM zone 36S")
    if crs.is_projected:
        return None
    kind = "geographic" if crs.is_geographic else "geocentric" if crs.is_geocentric else crs.type_name.lower()
    return (f"EPSG:{epsg} ({crs.name}) is a {kind} CRS, not a projected one; give the projected CRS the site is "
            "mapped in, e.g. the UTM zone of the site (32736 is WGS 84 / UTM zone 36S)")


def country_problem(code: str | None) -> str | None:
    """Why ``code`` is not an ISO 3166-1 alpha-2 country code (checked with pycountry when present), or None."""
    if code is None:
        return None
    try:
        import pycountry
    except ImportError:  # the tablet build: the model's pattern check stands
        return None
    if pycountry.countries.get(alpha_2=code) is None:
        return f"{code!r} is not an ISO 3166-1 alpha-2 country code; give two capital letters such as 'KE' or 'ET'"
    return None


# -- the whole file -------------------------------------------------------------------------------------------
def read_setup(path: Path | str, *, accept_residuals: bool = False) -> SetupPlan:
    """Read and check a set-up file; ``SetupFileInvalid`` lists every problem, ``GridResidualsTooLarge`` a bad
    fit. Nothing is written anywhere."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputFileInvalid(f"{path}: no such file; check the path (a template is in README.md, 'Your own site')") from None
    except UnicodeDecodeError:
        raise InputFileInvalid(f"{path}: not a UTF-8 text file; save it as UTF-8 text") from None
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SetupFileInvalid(path, [f"not valid TOML: {exc}; check quotes, brackets and '=' on that line"]) from None
    return _plan(path, text, doc, accept_residuals=accept_residuals)


def _plan(path: Path, text: str, doc: dict[str, Any], *, accept_residuals: bool) -> SetupPlan:
    from .errors import RecordInvalid

    bad = _Problems(text)
    bad.unknown_keys(None, 0, {k: v for k, v in doc.items()}, TOP_KEYS)
    for table in ("site", "season"):
        if not isinstance(doc.get(table), dict):
            bad.add(None, 0, None, f"the [{table}] table is missing; add it (see README.md, 'Your own site')")
    if bad.items:
        raise SetupFileInvalid(path, bad.items)

    site_in = doc["site"]
    bad.unknown_keys("site", 0, site_in, SITE_KEYS)
    site = None
    try:
        site = check(Site, {k: v for k, v in site_in.items() if k in SITE_KEYS}, record="site")
    except RecordInvalid as exc:
        bad.model("site", 0, exc)
    if isinstance(site_in.get("crs_epsg"), int) and (why := crs_problem(site_in["crs_epsg"])):
        bad.add("site", 0, "crs_epsg", why)
    if isinstance(site_in.get("country_code"), str) and (why := country_problem(site_in["country_code"])):
        bad.add("site", 0, "country_code", why)
    if site is None:  # the others need the site's id; report what we have
        site = Site(code="TMP", name="t", crs_epsg=32736)

    season_in = doc["season"]
    bad.unknown_keys("season", 0, season_in, SEASON_KEYS)
    season = None
    try:
        season = check(Season, {"site_id": site.id, **{k: v for k, v in season_in.items() if k in SEASON_KEYS}},
                       record="season")
    except RecordInvalid as exc:
        bad.model("season", 0, exc)

    control = _control_points(path, doc, site, bad)
    by_code = {cp.code: cp for cp in control}
    trenches = _trenches(doc, site, season, by_code, bad)
    for code, off in far_control_points(control):
        index = next((i for i, e in enumerate(doc.get("control_point", []) or []) if e.get("code") == code), None)
        message = (f"its CRS coordinates lie {off:,.0f} m from where its grid coordinates put it among the other "
                   "control points; check crs_e and crs_n for a typo (or a point from another zone)")
        if index is not None:
            bad.add("control_point", index, "crs_e", message, label=code)
        else:
            bad.add(None, 0, "control_points_csv", f"control point {code}: {message}")
    if bad.items:
        raise SetupFileInvalid(path, bad.items)
    assert season is not None
    try:
        site, fit, poly, warnings = fit_site_grid(site, control, centre=_centre(trenches, control),
                                                  accept_residuals=accept_residuals)
    except WeakGeometry as exc:
        raise SetupFileInvalid(path, [f"control points: {exc}"]) from None
    return SetupPlan(site, season, control, trenches, fit, poly, warnings)


def _control_points(path: Path, doc: dict[str, Any], site: Site, bad: _Problems) -> list[ControlPoint]:
    from .errors import RecordInvalid

    entries: list[tuple[str, dict[str, Any], Any]] = []
    inline = doc.get("control_point", [])
    if not isinstance(inline, list):
        bad.add(None, 0, "control_point", "write each control point as its own [[control_point]] table")
        inline = []
    for i, e in enumerate(inline):
        bad.unknown_keys("control_point", i, e, CONTROL_KEYS, label=str(e.get("code", i + 1)))
        entries.append(("inline", e, i))
    csv_name = doc.get("control_points_csv")
    if csv_name is not None:
        csv_path = (path.parent / str(csv_name))
        try:
            for row in read_control_csv(csv_path):
                entries.append(("csv", row, row.pop("_line")))
        except InputFileInvalid as exc:
            bad.add(None, 0, "control_points_csv", str(exc))
    out: list[ControlPoint] = []
    seen: set[str] = set()
    for source, data, where in entries:
        label = str(data.get("code", "?"))
        try:
            cp = check(ControlPoint, {"site_id": site.id, **{k: data.get(k) for k in CONTROL_KEYS if k in data}},
                       record="control_point")
        except RecordInvalid as exc:
            if source == "inline":
                bad.model("control_point", where, exc, label=label)
            else:
                for p in exc.problems:
                    bad.add(None, 0, "control_points_csv", f"{csv_name} line {where}, {p.field}: {p.message}; {p.fix}")
            continue
        if cp.code in seen:
            message = f"control point {cp.code} is defined twice; give each point one code"
            if source == "inline":
                bad.add("control_point", where, "code", message, label=label)
            else:
                bad.add(None, 0, "control_points_csv", f"{csv_name} line {where}: {message}")
            continue
        seen.add(cp.code)
        out.append(cp)
    return out


def _trenches(doc: dict[str, Any], site: Site, season: Season | None, control: dict[str, ControlPoint],
              bad: _Problems) -> list[Trench]:
    from .errors import RecordInvalid

    entries = doc.get("trench", [])
    if not isinstance(entries, list) or not entries:
        bad.add(None, 0, None, "no [[trench]] is defined; add at least one trench with its code and outline")
        return []
    out: list[Trench] = []
    rings: dict[str, list[tuple[float, float]]] = {}
    index_of: dict[str, int] = {}
    for i, e in enumerate(entries):
        label = str(e.get("code", i + 1))
        bad.unknown_keys("trench", i, e, TRENCH_KEYS, label=label)
        if "outline" not in e:
            bad.add("trench", i, "outline", "missing; give the corners as [[E, N], ...] or control-point codes",
                    label=label)
            continue
        try:
            ring = parse_outline(e["outline"], control)
        except ValueError as exc:
            bad.add("trench", i, "outline", str(exc), label=label)
            continue
        code = e.get("code")
        if (problem := outline_problem(ring)) is not None:
            bad.add("trench", i, "outline", problem, label=label)
            continue
        if code in rings:
            bad.add("trench", i, "code", f"trench {code} is defined twice; give each trench one code", label=label)
            continue
        if isinstance(code, str):
            rings[code], index_of[code] = ring, i
        try:
            out.append(check(Trench, {"site_id": site.id, "code": code, "outline": _open_ring(ring),
                                      "seasons_opened": [season.id] if season else []}, record="trench"))
        except RecordInvalid as exc:
            bad.model("trench", i, exc, label=label)
    for code, problem in check_outlines(rings):
        bad.add("trench", index_of[code], "outline", problem, label=code)
    return out


def _centre(trenches: list[Trench], control: list[ControlPoint]) -> tuple[float, float] | None:
    pts = [p for t in trenches for p in t.outline] or [(cp.e, cp.n) for cp in control]
    if not pts:
        return None
    return (sum(p[0] for p in pts) / len(pts), sum(p[1] for p in pts) / len(pts))

