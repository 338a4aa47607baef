"""Ages for every unit, horizon and find: an order-constrained Monte Carlo age model over the laboratory dates.

The model, in the order it is built (every step a pure function of the site's records, numpy only):

1. **Dates.** Each laboratory date is a normal error on its unit's true age (``age_ka``, ``sigma_ka``, one sigma,
   in ka; no calibration curve: the dates Baulk holds are already ages). A date on a unit that is not recorded,
   and every date the order cannot reconcile, is left out and named with the reason: the contradictions are
   those of ``dating.age_issues`` (an upper date older than a lower one beyond both two-sigma ranges), run on the
   matrix and the horizon order together; of each contradicting pair, the date in the most contradictions goes
   first (on a tie, the upper one, which ``age_issues`` names), until none is left. Several dates on one unit
   (or same-as group) are combined into their inverse-variance weighted mean when they pass the chi-square
   test of agreement (Ward and Wilson 1978, from memory); when they fail it, all of them are left out, named.
2. **Order.** A unit is younger than every unit the matrix puts below it (``matrix.build_matrix``), and a unit
   in a horizon is younger than the units of every lower horizon (``Horizon.order``). When the horizon order
   contradicts the matrix (the HORIZON_ORDER check) the model keeps the matrix's order alone and says so; while
   relations go round in a circle (MATRIX_CYCLE), the relations inside the circle are left out, with a note.
3. **Draws.** The dated ages are drawn from their normal distributions and only draws that respect the order
   are kept: with a flat prior on the ordered ages, this is the order-constrained posterior of the Bayesian
   chronologies of Buck, Cavanagh and Litton (1991, Antiquity 65: 808-821) and Bronk Ramsey (2009, Radiocarbon
   51: 337-360), here without calibration (from memory). Plain rejection is exact but keeps almost nothing once
   dates overlap (twenty equal dates in one column keep one draw in 20! = 2.4e18), so the draws come from a
   Gibbs sampler over the order constraints, the scheme Buck, Litton and Smith (1992, J. Archaeol. Sci. 19:
   497-512) used for ordered dates (from memory): a date is drawn from its normal distribution truncated to the
   interval its neighbours in the order leave it (Geweke 1991, from memory). Single-date steps crawl when many
   dates overlap, so each sweep also shifts runs of 2, 4, 8 ... dates along the order, and all of them, by one
   amount drawn from its exact conditional distribution (``sample_ordered``). A truncated normal is drawn by
   rejection from the untruncated one first, else through the inverse of the normal distribution function
   (Acklam's rational approximation, relative error 1.15e-9; the distribution function through the
   Chebyshev-fitted complementary error function of Press et al., Numerical Recipes, 2nd ed., section 6.2,
   fractional error below 1.2e-7; both from memory and checked against scipy in the tests). Many chains run side
   by side, one per draw: each starts from its own unconstrained draw when that respects the order (an exact
   rejection draw) and otherwise from the same values sorted along the order, then runs ``sweeps`` sweeps; the
   chains' last states are the draws, independent of one another.
4. **Depth.** Undated units get ages by depth within their trench: each unit's top and bottom surfaces
   (``geometry.Surface`` over its level points) are read at the trench's centre; a dated unit's date sits at its
   mid-depth, and in each draw the age is linear in elevation between the mid-depths of the dated units above
   and below (so every draw's ages are carried through). Above the uppermost or below the lowest dated unit of a
   trench the age is extrapolated with the trench's mean accumulation rate (its uppermost to its lowest dated
   unit), or, in a trench with one dated unit, with the site's (all such trenches pooled). A unit in a trench
   with no dated unit, or with no level points, takes its horizon's mean age. A unit's ages are therefore fixed
   linear combinations of the dated ages (``UnitRule``): a find's age follows from its Z between its unit's top
   and bottom surfaces at its own E/N.

Assumptions and limits: a date dates the middle of its unit; deposition is steady between dated units (no
hiatus, no erosion); layers are flat-lying across the trench; depth says nothing about cut features, so the
age by depth of a fill or a cut is checked against the bracket superposition allows (``dating.age_brackets``)
and a note is written when its median falls outside it; the flat prior on ordered dates spreads a long run of
closely spaced dates apart (the known behaviour of uniform priors on many ordered events; Steier and Rom 2000,
from memory); undated units are not held to the order between trenches (only depth places them), so horizon
spans built from different trenches can overlap.
"""

from __future__ import annotations

import heapq
import math
import uuid
from dataclasses import dataclass, field, replace
from typing import Iterable, Sequence

import numpy as np
from numpy.typing import ArrayLike, NDArray

from ..records import AgeDetermination, Horizon, Unit
from .data import SiteData
from .dating import age_brackets, age_issues, date_words
from .geometry import Surface
from .graph import reachability, strongly_connected, topological_order, transitive_reduction
from .matrix import Matrix, build_matrix

__all__ = [
    "AgeModel", "AgePlan", "AgeSummary", "Anchor", "FindAges", "HorizonAge", "LeftOut", "OrderedDraws", "QUANTILES",
    "SEED", "SWEEPS", "SeriesSummary", "UnitAge", "UnitRule", "age_depth_curve", "combine_dates", "draw_ages",
    "find_ages", "fit_age_model", "horizon_ages", "horizon_depths", "horizon_draws", "norm_cdf", "norm_ppf",
    "plan_ages", "sample_ordered", "series_by_horizon", "summarise", "unit_ages",
]

F = NDArray[np.float64]

SEED = 20  # the default seed: the same store gives the same tables
DRAWS = 10_000
SWEEPS = 10  # Gibbs sweeps per chain; tests/schema/strata/test_agemodel.py checks twenty overlapping dates with it
# the quantiles reported: 95 % and 68.3 % (one sigma of a normal) central intervals and the median
QUANTILES = (0.025, 0.158655, 0.5, 0.841345, 0.975)
EPS_Z = 1e-6  # metres: two depths closer than this are the same depth


# -- the normal distribution in numpy ---------------------------------------------------------------------------
_ERFC = (-1.26551223, 1.00002368, 0.37409196, 0.09678418, -0.18628806, 0.27886807, -1.13520398, 1.48851587,
         -0.82215223, 0.17087277)


def _erfc(x: F) -> F:
    """Complementary error function, fractional error below 1.2e-7 everywhere (Press et al., Numerical Recipes
    in C, 2nd ed., 1992, section 6.2, ``erfcc``; from memory)."""
    z = np.abs(x)
    t = 1.0 / (1.0 + 0.5 * z)
    acc = _ERFC[-1] * t
    for c in reversed(_ERFC[1:-1]):
        acc += c
        acc *= t
    acc += _ERFC[0]
    acc -= z * z
    np.exp(acc, out=acc)
    acc *= t
    return np.where(x >= 0, acc, 2.0 - acc)


def norm_cdf(x: ArrayLike) -> F:
    """The standard normal distribution function, accurate in relative terms far into the lower tail."""
    return 0.5 * _erfc(-np.asarray(x, dtype=float) / math.sqrt(2.0))


_A = (-3.969683028665376e+01, 2.209460984245205e+02, -2.759285104469687e+02, 1.383577518672690e+02,
      -3.066479806614716e+01, 2.506628277459239e+00)
_B = (-5.447609879822406e+01, 1.615858368580409e+02, -1.556989798598866e+02, 6.680131188771972e+01,
      -1.328068155288572e+01)
_C = (-7.784894002430293e-03, -3.223964580411365e-01, -2.400758277161838e+00, -2.549732539343734e+00,
      4.374664141464968e+00, 2.938163982698783e+00)
_D = (7.784695709041462e-03, 3.224671290700398e-01, 2.445134137142996e+00, 3.754408661907416e+00)
_P_LOW = 0.02425


def _horner(coef: Sequence[float], x: F) -> F:
    out = np.full_like(x, coef[0])
    for c in coef[1:]:
        out = out * x + c
    return out


def norm_ppf(p: ArrayLike) -> F:
    """The standard normal quantile function for 0 < p < 1, relative error below 1.15e-9 (P. J. Acklam's
    rational approximation, 2003; from memory)."""
    p = np.asarray(p, dtype=float)
    out = np.empty_like(p)
    low, high = p < _P_LOW, p > 1 - _P_LOW
    mid = ~(low | high)
    q = p[mid] - 0.5
    r = q * q
    out[mid] = _horner(_A, r) * q / (_horner(_B, r) * r + 1.0)
    for sel, sign, tail in ((low, 1.0, p[low]), (high, -1.0, 1.0 - p[high])):
        q = np.sqrt(-2.0 * np.log(tail))
        out[sel] = sign * _horner(_C, q) / (_horner(_D, q) * q + 1.0)
    return out


def _truncated_standard(a: F, b: F, rng: np.random.Generator) -> F:
    """Standard normal draws truncated to [a, b] by the inverse distribution function; an interval above the
    mean is mirrored below it first, so the tail probabilities keep their relative precision."""
    flip = a > 0
    lo, hi = np.where(flip, -b, a), np.where(flip, -a, b)
    plo, phi = norm_cdf(lo), norm_cdf(hi)
    p = np.clip(plo + rng.random(len(a)) * (phi - plo), 1e-300, 1 - 1e-16)
    z = np.clip(norm_ppf(p), lo, hi)
    z = np.where(phi > plo, z, hi)  # both ends so far out that they underflow: the end nearer the mean
    return np.where(flip, -z, z)


def _truncated_normal(mu: F, sigma: float, lo: F | None, hi: F | None,
                      rng: np.random.Generator) -> tuple[F, int]:
    """N(mu, sigma) truncated to (lo, hi), per draw: rejection from the untruncated normal first (exact where it
    lands inside), the inverse distribution function for the rest. Returns the draws and how many the first,
    plain proposal gave."""
    y = mu + sigma * rng.standard_normal(len(mu))
    inside = np.ones(len(mu), dtype=bool)
    if lo is not None:
        inside &= y > lo
    if hi is not None:
        inside &= y < hi
    out = ~inside
    if out.any():
        m = mu[out]
        a = (lo[out] - m) / sigma if lo is not None else np.full(len(m), -np.inf)
        b = (hi[out] - m) / sigma if hi is not None else np.full(len(m), np.inf)
        y[out] = m + sigma * _truncated_standard(a, b, rng)
    return y, int(inside.sum())


# -- the order-constrained sampler ------------------------------------------------------------------------------
@dataclass(frozen=True)
class OrderedDraws:
    """Draws of ordered ages: ``theta[d, i]`` is date ``i`` in draw ``d`` (ka)."""

    theta: F
    order_acceptance: float  # share of unconstrained draws already in order: what plain rejection would keep
    proposal_acceptance: float  # share of the Gibbs proposals that fell inside their interval at once
    sweeps: int


def _linear_extension(n: int, pairs: list[tuple[int, int]], mean: F) -> list[int]:
    """An order of the dates that respects every pair (younger first), the younger mean first where free."""
    later: list[list[int]] = [[] for _ in range(n)]
    indeg = [0] * n
    for i, j in pairs:
        later[i].append(j)
        indeg[j] += 1
    ready = [(float(mean[i]), i) for i in range(n) if indeg[i] == 0]
    heapq.heapify(ready)
    out: list[int] = []
    while ready:
        _m, i = heapq.heappop(ready)
        out.append(i)
        for j in later[i]:
            indeg[j] -= 1
            if indeg[j] == 0:
                heapq.heappush(ready, (float(mean[j]), j))
    if len(out) != n:
        raise ValueError("the order constraints go round in a circle: no ordering of the dates satisfies them")
    return out


@dataclass(frozen=True)
class _Block:
    """A set of dates moved together by one shift: its members, their weights (1 / sigma^2), and the order pairs
    that cross its edge (they bound the shift)."""

    members: NDArray[np.intp]
    weight: F
    below: tuple[NDArray[np.intp], NDArray[np.intp]] | tuple[()]  # (outside i, inside j), i younger: shift > x_i - x_j
    above: tuple[NDArray[np.intp], NDArray[np.intp]] | tuple[()]  # (inside i, outside j), j older: shift < x_j - x_i


def _columns(pairs: list[tuple[int, int]]) -> tuple[NDArray[np.intp], NDArray[np.intp]] | tuple[()]:
    """Pairs as two index arrays (their first and their second members), or () for none."""
    if not pairs:
        return ()
    first, second = zip(*pairs)
    return np.asarray(first, dtype=np.intp), np.asarray(second, dtype=np.intp)


def _blocks(extension: list[int], reduced: list[tuple[int, int]], sigma: F, offset: bool) -> list[_Block]:
    """Runs of 1, 2, 4, ... dates along the order, and all of them (shifted by half a run on odd sweeps)."""
    n, out, size = len(extension), [], 1
    while True:
        start = -(size // 2) if offset and size > 1 else 0
        for k in range(start, n, size):
            members = extension[max(k, 0):min(k + size, n)]
            inside = set(members)
            below = [(i, j) for i, j in reduced if i not in inside and j in inside]
            above = [(i, j) for i, j in reduced if i in inside and j not in inside]
            out.append(_Block(np.asarray(members, dtype=np.intp), 1.0 / sigma[members] ** 2,
                              _columns(below), _columns(above)))
        if size >= n:
            return out
        size *= 2


def sample_ordered(mean: ArrayLike, sigma: ArrayLike, pairs: Iterable[tuple[int, int]], *, draws: int = DRAWS,
                   seed: int = SEED, sweeps: int = SWEEPS) -> OrderedDraws:
    """Draws of ages ``theta_i ~ N(mean_i, sigma_i)`` conditioned on ``theta_i < theta_j`` for every ``(i, j)`` in
    ``pairs`` (i younger than j). Seeded: the same arguments give the same draws.

    Each Gibbs step draws one shift of a block of dates from its exact conditional distribution (a normal
    truncated by the order pairs that cross the block's edge): single dates, then runs of 2, 4, 8 ... along the
    order and finally all of them, so slow collective moves (the whole column sliding or stretching) mix as fast
    as single dates do (the multigrid idea of Goodman and Sokal 1989; moves along a group of translations, Liu and
    Sabatti 2000; both from memory)."""
    mu, sd = np.asarray(mean, dtype=float).ravel(), np.asarray(sigma, dtype=float).ravel()
    n = len(mu)
    if len(sd) != n or not (np.isfinite(mu).all() and np.isfinite(sd).all() and (sd > 0).all()):
        raise ValueError("mean and sigma must be finite, of the same length, with every sigma above 0")
    if draws < 1 or sweeps < 0:
        raise ValueError(f"draws must be at least 1 and sweeps at least 0 (got {draws} and {sweeps})")
    given = sorted({(int(i), int(j)) for i, j in pairs})
    for i, j in given:
        if not (0 <= i < n and 0 <= j < n) or i == j:
            raise ValueError(f"the pair ({i}, {j}) does not name two different dates of the {n} given")
    extension = _linear_extension(n, given, mu)
    reduced = sorted(transitive_reduction(range(n), given)) if given else []
    rng = np.random.default_rng(seed)
    x = mu + sd * rng.standard_normal((draws, n))
    ok = np.ones(draws, dtype=bool)
    for i, j in reduced:
        ok &= x[:, i] < x[:, j]
    order_acceptance = float(ok.mean())
    bad = np.flatnonzero(~ok)
    if len(bad):
        x[np.ix_(bad, extension)] = np.sort(x[bad], axis=1)
    if not reduced:
        return OrderedDraws(x, order_acceptance, 1.0, 0)
    plans = (_blocks(extension, reduced, sd, False), _blocks(extension, reduced, sd, True))
    rows = np.ascontiguousarray(x.T)  # one date per row: each block reads whole rows
    proposals = accepted = 0
    for sweep in range(sweeps):
        for b in plans[sweep % 2]:
            total = float(b.weight.sum())
            if len(b.members) == 1:
                centre = mu[b.members[0]] - rows[b.members[0]]
            else:
                centre = b.weight @ (mu[b.members, None] - rows[b.members]) / total
            lo = (rows[b.below[0]] - rows[b.below[1]]).max(axis=0) if b.below else None
            hi = (rows[b.above[1]] - rows[b.above[0]]).min(axis=0) if b.above else None
            shift, inside = _truncated_normal(centre, 1.0 / math.sqrt(total), lo, hi, rng)
            rows[b.members] += shift
            proposals += draws
            accepted += inside
    share = accepted / proposals if proposals else 1.0
    return OrderedDraws(np.ascontiguousarray(rows.T), order_acceptance, share, sweeps)


def summarise(samples: ArrayLike) -> F:
    """Per column: the 2.5, 15.9, 50, 84.1 and 97.5 % quantiles (rows of the result, ``QUANTILES``)."""
    return np.quantile(np.asarray(samples, dtype=float), QUANTILES, axis=0)


# -- dates: left out, combined ----------------------------------------------------------------------------------
@dataclass(frozen=True)
class LeftOut:
    """A date the model does not use, and why."""

    date_id: uuid.UUID
    lab_code: str
    unit: str
    age_ka: float
    sigma_ka: float
    reason: str


@dataclass(frozen=True)
class Anchor:
    """One dated same-as group: a column of the draws."""

    group: uuid.UUID
    label: str  # unit codes of the group
    dates: tuple[str, ...]  # lab codes (or short ids) of the dates combined
    age_ka: float
    sigma_ka: float

    @property
    def name(self) -> str:
        return f"{self.label} ({', '.join(self.dates)})"


_CHI2_95 = (3.841, 5.991, 7.815, 9.488, 11.070, 12.592, 14.067, 15.507, 16.919, 18.307)  # df 1-10 (standard tables)


def _chi2_95(df: int) -> float:
    """The 95 % point of chi-square: the standard table to 10 degrees of freedom, then the Wilson and Hilferty
    (1931) cube-root approximation (both from memory)."""
    if df <= len(_CHI2_95):
        return _CHI2_95[df - 1]
    k = 2.0 / (9.0 * df)
    return df * (1.0 - k + 1.6448536 * math.sqrt(k)) ** 3


def combine_dates(ages: Sequence[float], sigmas: Sequence[float]) -> tuple[float, float, float, float]:
    """The inverse-variance weighted mean of dates of one event, its sigma, the test statistic
    T = sum((a - mean)^2 / s^2) and its 95 % critical value (chi-square, n - 1 degrees of freedom; Ward and
    Wilson 1978, from memory). One date comes back as it is, with T = 0."""
    a, s = np.asarray(ages, dtype=float), np.asarray(sigmas, dtype=float)
    w = 1.0 / s**2
    mean = float((w * a).sum() / w.sum())
    t = float(((a - mean) ** 2 * w).sum())
    return mean, float(1.0 / math.sqrt(w.sum())), t, (_chi2_95(len(a) - 1) if len(a) > 1 else math.inf)


def _lab(a: AgeDetermination) -> str:
    return date_words(a)


def _order_matrix(matrix: Matrix, horizons: list[Horizon], dated: set[uuid.UUID]) -> tuple[Matrix, list[str]]:
    """The matrix with ``below`` widened by the horizon order (a group is later than every group of a lower
    horizon) for the dated groups (the only ones the draws order); the matrix alone, with a note, when the two
    disagree. The horizon order enters through one node per horizon boundary, so its edges grow with the units,
    not with their square."""
    assert matrix.below is not None
    order = {h.id: h.order for h in horizons}
    level: dict[uuid.UUID, int] = {}
    for g, members in matrix.members.items():
        orders = {order[matrix.units[u].horizon_id] for u in members if matrix.units[u].horizon_id in order}
        if len(orders) == 1:
            level[g] = orders.pop()
    steps = sorted(set(level.values()))
    if len(steps) < 2:
        return matrix, []
    edges: set[tuple[object, object]] = set(matrix.edges)
    for upper, lower in zip(steps, steps[1:]):
        edges |= {(g, ("boundary", upper)) for g, k in level.items() if k == upper}
        edges |= {(("boundary", upper), g) for g, k in level.items() if k == lower}
        edges.add((("boundary", upper), ("boundary", lower)))
    nodes = [*matrix.members, *(("boundary", k) for k in steps)]
    try:
        topological_order(nodes, edges)
    except ValueError:
        return matrix, ["the horizon order disagrees with the matrix (see the HORIZON_ORDER checks): the ages use "
                        "the matrix's order alone"]
    later: dict[object, list[object]] = {}
    for a, b in edges:
        later.setdefault(a, []).append(b)
    below: dict[uuid.UUID, set[uuid.UUID]] = {}
    for g in dated:
        seen: set[object] = set()
        todo = list(later.get(g, ()))
        while todo:
            node = todo.pop()
            if node not in seen:
                seen.add(node)
                todo.extend(later.get(node, ()))
        below[g] = {n for n in seen if isinstance(n, uuid.UUID)}
    return replace(matrix, below=below), []


def _without_cycles(matrix: Matrix) -> tuple[Matrix, list[str]]:
    """The matrix as it is, or, while relations go round in a circle, without the relations inside each circle
    (the rest of the matrix and the horizons still order those units), with a note naming them."""
    if matrix.below is not None:
        return matrix, []
    notes, edges = [], set(matrix.edges)
    for comp in strongly_connected(matrix.members, matrix.edges):
        if len(comp) > 1:
            inside = set(comp)
            edges = {(a, b) for a, b in edges if not (a in inside and b in inside)}
            notes.append(f"the relations among units {', '.join(sorted(matrix.label(g) for g in comp))} go round in a "
                         "circle (see the MATRIX_CYCLE check): the ages leave those relations out and order these "
                         "units by the rest of the matrix and their horizons; correct the relations")
    return replace(matrix, edges=edges, below=reachability(matrix.members, edges)), notes


def _reconcile(matrix: Matrix, ages: list[AgeDetermination]) -> tuple[list[AgeDetermination], list[LeftOut]]:
    """Dates the order can hold, and those left out (unknown unit, contradiction), each with its reason."""
    units = matrix.units
    left: list[LeftOut] = []

    def out(a: AgeDetermination, why: str) -> None:
        code = units[a.unit_id].code if a.unit_id in units else str(a.unit_id)
        left.append(LeftOut(a.id, _lab(a), code, a.age_ka, a.sigma_ka, why))

    kept = [a for a in ages if a.unit_id in matrix.group_of]
    for a in ages:
        if a.unit_id not in matrix.group_of:
            out(a, f"{_lab(a)} names a unit that is not recorded; correct the date's unit")
    while True:
        found = [i for i in age_issues(matrix, kept) if i.code == "AGE_CONTRADICTION"]
        if not found:
            return kept, left
        count: dict[str, int] = {}
        upper_in: set[str] = set()
        for i in found:
            count[i.record_id] = count.get(i.record_id, 0) + 1
            count[i.detail] = count.get(i.detail, 0) + 1
            upper_in.add(i.record_id)
        by_id = {str(a.id): a for a in kept}
        worst = max(count, key=lambda d: (count[d], d in upper_in, _lab(by_id[d])))
        involved = [i for i in found if worst in (i.record_id, i.detail)]
        out(by_id[worst], f"{'; '.join(i.message for i in involved)}. Left out of the age model: it contradicts "
                          f"{count[worst]} other date{'s' if count[worst] > 1 else ''} in the order; {involved[0].fix}")
        kept = [a for a in kept if str(a.id) != worst]


def _anchors(matrix: Matrix, ages: list[AgeDetermination]) -> tuple[list[Anchor], list[LeftOut]]:
    by_group: dict[uuid.UUID, list[AgeDetermination]] = {}
    for a in ages:
        by_group.setdefault(matrix.group_of[a.unit_id], []).append(a)
    anchors, left = [], []
    for g, dates in by_group.items():
        dates.sort(key=_lab)
        mean, sigma, t, critical = combine_dates([a.age_ka for a in dates], [a.sigma_ka for a in dates])
        if t > critical:
            for a in dates:
                left.append(LeftOut(a.id, _lab(a), matrix.units[a.unit_id].code, a.age_ka, a.sigma_ka,
                                    f"the {len(dates)} dates on unit {matrix.label(g)} "
                                    f"({', '.join(_lab(d) for d in dates)}) disagree with one another (T = {t:.2f} "
                                    f"above the 95 % chi-square value {critical:.2f}): all are left out; check the "
                                    "samples and keep the ones you trust"))
            continue
        anchors.append(Anchor(g, matrix.label(g), tuple(_lab(a) for a in dates), mean, sigma))
    anchors.sort(key=lambda a: a.label)
    return anchors, left


# -- units by depth ---------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class UnitRule:
    """How one unit's ages follow from the dated ones: each a weight vector over the anchors (None: no age)."""

    unit_id: uuid.UUID
    code: str
    trench_id: uuid.UUID
    horizon_id: uuid.UUID | None
    top_z: float | None
    bottom_z: float | None
    how: str  # dated, interpolated, extrapolated, horizon (its horizon's mean), or "" (no age)
    top: F | None
    mid: F | None
    bottom: F | None
    note: str = ""
    anchor: int | None = None  # a dated unit: the column of its own date

    @property
    def mid_z(self) -> float | None:
        return None if self.top_z is None or self.bottom_z is None else (self.top_z + self.bottom_z) / 2


@dataclass
class _Line:
    """A trench's age-depth line: anchor points (elevation, weights) from the top down, and the rate's weights."""

    trench: str
    points: list[tuple[float, F]]
    rate: F | None = None  # ka per metre of depth, as weights over the anchors

    def at(self, z: float, site_rate: F | None) -> tuple[F | None, str]:
        if not self.points:
            return None, f"trench {self.trench} has no dated unit with level points"
        (z0, w0), (zn, wn) = self.points[0], self.points[-1]
        rate = self.rate if self.rate is not None else site_rate
        if z > z0 + EPS_Z or z < zn - EPS_Z:
            if rate is None:
                where = "above the uppermost" if z > z0 else "below the lowest"
                return None, (f"it lies {where} dated unit of trench {self.trench}, and no trench has two dated "
                              "units at different depths to give an accumulation rate")
            return (w0 - (z - z0) * rate, "extrapolated") if z > z0 else (wn + (zn - z) * rate, "extrapolated")
        for (za, wa), (zb, wb) in zip(self.points, self.points[1:]):
            if za >= z >= zb:
                f = (za - z) / (za - zb)
                return (1 - f) * wa + f * wb, "interpolated"
        return w0, "interpolated"  # one anchor, at this very depth


def _surfaces(data: SiteData) -> dict[tuple[uuid.UUID, str], Surface]:
    pts: dict[tuple[uuid.UUID, str], list[tuple[float, float, float]]] = {}
    for lp in data.level_points:
        pts.setdefault((lp.unit_id, lp.surface), []).append((lp.e, lp.n, lp.z))
    return {k: Surface.from_points(sorted(v)) for k, v in pts.items()}


def _centres(data: SiteData) -> dict[uuid.UUID, tuple[float, float]]:
    out = {}
    for t in data.trenches:
        ring = np.asarray(t.outline, dtype=float).reshape(-1, 2)
        if len(ring) > 3 and np.allclose(ring[0], ring[-1]):
            ring = ring[:-1]
        out[t.id] = (float(ring[:, 0].mean()), float(ring[:, 1].mean()))
    return out


def _depths(unit: Unit, surfaces: dict[tuple[uuid.UUID, str], Surface],
            centre: tuple[float, float] | None) -> tuple[float | None, float | None]:
    top, bottom = surfaces.get((unit.id, "top")), surfaces.get((unit.id, "bottom"))
    if top is None or bottom is None:
        return None, None
    at = centre if centre is not None else tuple(top.points[:, :2].mean(axis=0))
    return float(top.z_at(at[0], at[1])[0][0]), float(bottom.z_at(at[0], at[1])[0][0])


def _lines(units: list[Unit], depth: dict[uuid.UUID, tuple[float | None, float | None]], matrix: Matrix,
           column: dict[uuid.UUID, int], n: int,
           trench_code: dict[uuid.UUID, str]) -> tuple[dict[uuid.UUID, _Line], F | None]:
    lines = {t: _Line(code, []) for t, code in trench_code.items()}
    for u in units:
        top, bottom = depth[u.id]
        col = column.get(matrix.group_of[u.id])
        if col is None or top is None or bottom is None:
            continue
        lines.setdefault(u.trench_id, _Line(str(u.trench_id), [])).points.append(((top + bottom) / 2, np.eye(n)[col]))
    spans, total = np.zeros(n), 0.0
    for line in lines.values():
        merged: dict[float, list[F]] = {}
        for z, w in line.points:
            key = next((k for k in merged if abs(k - z) <= EPS_Z), z)
            merged.setdefault(key, []).append(w)
        line.points = sorted(((z, np.mean(ws, axis=0)) for z, ws in merged.items()), key=lambda p: -p[0])
        if len(line.points) > 1:
            (z0, w0), (zn, wn) = line.points[0], line.points[-1]
            line.rate = (wn - w0) / (z0 - zn)
            spans += wn - w0
            total += z0 - zn
    return lines, (spans / total if total > 0 else None)


def _unit_rules(data: SiteData, matrix: Matrix, anchors: list[Anchor], surfaces: dict[tuple[uuid.UUID, str], Surface],
                ) -> tuple[dict[uuid.UUID, UnitRule], dict[uuid.UUID, _Line], F | None]:
    n = len(anchors)
    column = {a.group: i for i, a in enumerate(anchors)}
    centres = _centres(data)
    units = sorted(data.units, key=lambda u: u.code)
    depth = {u.id: _depths(u, surfaces, centres.get(u.trench_id)) for u in units}
    trench_code = {t.id: t.code for t in data.trenches}
    lines, site_rate = _lines(units, depth, matrix, column, n, trench_code)
    rules = {}
    for u in units:
        top, bottom = depth[u.id]
        col = column.get(matrix.group_of[u.id])
        line = lines.get(u.trench_id) or _Line(trench_code.get(u.trench_id, str(u.trench_id)), [])
        if col is not None:
            own = np.eye(n)[col]
            wt = line.at(top, site_rate)[0] if top is not None else None
            wb = line.at(bottom, site_rate)[0] if bottom is not None else None
            note = "" if wt is not None and wb is not None else "its top and bottom take its own date (no depth scale)"
            rules[u.id] = UnitRule(u.id, u.code, u.trench_id, u.horizon_id, top, bottom, "dated",
                                   own if wt is None else wt, own, own if wb is None else wb, note, col)
            continue
        if top is None or bottom is None:
            rules[u.id] = UnitRule(u.id, u.code, u.trench_id, u.horizon_id, top, bottom, "", None, None, None,
                                   "no age: it has no level points on its top and bottom surfaces, so its depth "
                                   "is unknown")
            continue
        (wt, how_t), (wm, how), (wb, how_b) = (line.at(z, site_rate) for z in (top, (top + bottom) / 2, bottom))
        if wt is None or wm is None or wb is None:
            rules[u.id] = UnitRule(u.id, u.code, u.trench_id, u.horizon_id, top, bottom, "", None, None, None,
                                   f"no age: {how if wm is None else how_t if wt is None else how_b}")
            continue
        how = "extrapolated" if "extrapolated" in (how_t, how, how_b) else "interpolated"
        rules[u.id] = UnitRule(u.id, u.code, u.trench_id, u.horizon_id, top, bottom, how, wt, wm, wb)
    return _by_horizon(rules), lines, site_rate


def _by_horizon(rules: dict[uuid.UUID, UnitRule]) -> dict[uuid.UUID, UnitRule]:
    """Units left without an age (no dated unit in their trench, no level points) take their horizon's: the mean
    of the top, middle and bottom ages of the horizon's units aged by a date or by depth, draw by draw."""
    aged: dict[uuid.UUID, list[UnitRule]] = {}
    for r in rules.values():
        if r.mid is not None and r.horizon_id is not None:
            aged.setdefault(r.horizon_id, []).append(r)
    out = dict(rules)
    for r in rules.values():
        peers = aged.get(r.horizon_id) if r.horizon_id is not None else None
        if r.mid is None and peers:
            mean = [np.mean([getattr(p, k) for p in peers], axis=0) for k in ("top", "mid", "bottom")]
            out[r.unit_id] = replace(r, how="horizon", top=mean[0], mid=mean[1], bottom=mean[2],
                                     note=f"its horizon's mean age ({r.note.removeprefix('no age: ')})")
    return out


# -- the model --------------------------------------------------------------------------------------------------
@dataclass
class AgePlan:
    """What the records fix before any draw: the dated ages (after dates are left out and combined), the order
    pairs between them, and the rules that carry them to every unit."""

    anchors: list[Anchor]
    pairs: list[tuple[int, int]]  # (i, j): anchor i is younger than anchor j
    rules: dict[uuid.UUID, UnitRule]
    left_out: list[LeftOut]
    notes: list[str]
    surfaces: dict[tuple[uuid.UUID, str], Surface] = field(default_factory=dict)
    lines: dict[uuid.UUID, _Line] = field(default_factory=dict)
    site_rate: F | None = None
    brackets: dict[uuid.UUID, tuple[float | None, float | None]] = field(default_factory=dict)
    problem: str | None = None  # why there are no ages at all


@dataclass
class AgeModel:
    """The draws of the dated ages and the rules that carry them to every unit."""

    anchors: list[Anchor]
    theta: F  # (draws, anchors), ka
    rules: dict[uuid.UUID, UnitRule]
    left_out: list[LeftOut]
    notes: list[str]
    draws: int
    seed: int
    sweeps: int
    order_acceptance: float
    proposal_acceptance: float
    surfaces: dict[tuple[uuid.UUID, str], Surface] = field(default_factory=dict)
    lines: dict[uuid.UUID, _Line] = field(default_factory=dict)
    site_rate: F | None = None
    brackets: dict[uuid.UUID, tuple[float | None, float | None]] = field(default_factory=dict)
    problem: str | None = None  # why there are no ages at all

    def ages(self, weights: F) -> F:
        """Draws (draws,) or (draws, k) of ages given weight vectors (n,) or (k, n) over the anchors."""
        return self.theta @ np.ascontiguousarray(np.asarray(weights, dtype=float).T)

    def rests_on(self, weights: Iterable[F | None]) -> str:
        used = np.zeros(len(self.anchors), dtype=bool)
        for w in weights:
            if w is not None:
                used |= np.abs(w) > 1e-12
        return "; ".join(a.name for a, u in zip(self.anchors, used) if u)


def plan_ages(data: SiteData, *, matrix: Matrix | None = None) -> AgePlan:
    """Steps 1, 2 and 4 of the module's docstring: everything but the draws. Never raises on the site's data:
    what cannot be modelled is said in ``problem``, ``notes``, ``left_out`` and each unit's note."""
    matrix = matrix or build_matrix(data.units, data.relations)
    acyclic, notes = _without_cycles(matrix)
    dated = {acyclic.group_of[a.unit_id] for a in data.ages if a.unit_id in acyclic.group_of}
    ordered, more = _order_matrix(acyclic, data.horizons, dated)
    notes += more
    kept, left = _reconcile(ordered, sorted(data.ages, key=_lab))
    anchors, disagreeing = _anchors(ordered, kept)
    left += disagreeing
    if not anchors:
        why = ("no laboratory date" if not data.ages
               else "no laboratory date the order can hold (see the dates left out)")
        problem = f"{why}: add dates with baulk date add or baulk date import"
        rules = {u.id: UnitRule(u.id, u.code, u.trench_id, u.horizon_id, None, None, "", None, None, None,
                                f"no age: {problem}") for u in data.units}
        return AgePlan([], [], rules, left, notes, problem=problem)
    col = {a.group: i for i, a in enumerate(anchors)}
    pairs = sorted((col[g], col[b]) for g in col for b in ordered.below[g] if b in col)
    surfaces = _surfaces(data)
    rules, lines, site_rate = _unit_rules(data, matrix, anchors, surfaces)
    means = np.asarray([a.age_ka for a in anchors])
    for line in lines.values():
        if line.rate is not None and float(means @ line.rate) < 0:
            notes.append(f"in trench {line.trench} the dated units lie deeper the younger they are: ages by depth "
                         "there run backwards (a cut feature dated?)")
    used = {a.id for a in kept if acyclic.group_of[a.unit_id] in col}
    brackets = {u: (b.youngest, b.oldest) for u, b in
                age_brackets(acyclic, [a for a in data.ages if a.id in used]).items()}
    return AgePlan(anchors, pairs, rules, left, notes, surfaces, lines, site_rate, brackets)


def draw_ages(plan: AgePlan, *, draws: int = DRAWS, seed: int = SEED, sweeps: int = SWEEPS) -> AgeModel:
    """Step 3 of the module's docstring: the ordered draws of the dated ages for a plan (seeded)."""
    if not plan.anchors:
        return AgeModel([], np.zeros((draws, 0)), plan.rules, plan.left_out, plan.notes, draws, seed, 0, 1.0, 1.0,
                        problem=plan.problem)
    drawn = sample_ordered([a.age_ka for a in plan.anchors], [a.sigma_ka for a in plan.anchors], plan.pairs,
                           draws=draws, seed=seed, sweeps=sweeps)
    return AgeModel(plan.anchors, drawn.theta, plan.rules, plan.left_out, plan.notes, draws, seed, drawn.sweeps,
                    drawn.order_acceptance, drawn.proposal_acceptance, plan.surfaces, plan.lines, plan.site_rate,
                    plan.brackets)


def fit_age_model(data: SiteData, *, matrix: Matrix | None = None, draws: int = DRAWS, seed: int = SEED,
                  sweeps: int = SWEEPS) -> AgeModel:
    """The site's age model (see the module's docstring): ``draw_ages(plan_ages(data))``."""
    return draw_ages(plan_ages(data, matrix=matrix), draws=draws, seed=seed, sweeps=sweeps)


# -- what is reported -------------------------------------------------------------------------------------------
@dataclass(frozen=True)
class AgeSummary:
    median_ka: float
    lo68_ka: float
    hi68_ka: float
    lo95_ka: float
    hi95_ka: float

    @classmethod
    def of(cls, q: F) -> "AgeSummary":
        lo95, lo68, med, hi68, hi95 = (float(v) for v in q)
        return cls(med, lo68, hi68, lo95, hi95)


@dataclass(frozen=True)
class UnitAge:
    unit_id: uuid.UUID
    code: str
    how: str
    top_z: float | None
    bottom_z: float | None
    age: AgeSummary | None  # at the unit's mid-depth (a dated unit: its date as modelled)
    top_median_ka: float | None
    bottom_median_ka: float | None
    rests_on: str
    note: str


def unit_ages(model: AgeModel) -> list[UnitAge]:
    """Every unit's modelled age, by unit code."""
    out = []
    for r in sorted(model.rules.values(), key=lambda r: r.code):
        if r.mid is None or r.top is None or r.bottom is None:
            out.append(UnitAge(r.unit_id, r.code, r.how, r.top_z, r.bottom_z, None, None, None, "", r.note))
            continue
        q = summarise(model.ages(np.vstack([r.mid, r.top, r.bottom])))
        age = AgeSummary.of(q[:, 0])
        note = r.note
        young, old = model.brackets.get(r.unit_id, (None, None))
        outside = (young is not None and age.median_ka < young) or (old is not None and age.median_ka > old)
        if r.how != "dated" and outside:
            note = (f"its age by depth ({age.median_ka:.1f} ka) falls outside what superposition allows "
                    f"({'?' if young is None else f'{young:g}'} to {'?' if old is None else f'{old:g}'} ka): depth "
                    "misleads here (a cut or a fill?); date it to be sure")
        out.append(UnitAge(r.unit_id, r.code, r.how, r.top_z, r.bottom_z, age, float(q[2, 1]), float(q[2, 2]),
                           model.rests_on([r.top, r.mid, r.bottom]), note))
    return out


def horizon_draws(model: AgeModel, horizons: list[Horizon]) -> dict[uuid.UUID, tuple[F, F]]:
    """Per horizon with aged units: the draws of its youngest (top) and oldest (base) ages."""
    out = {}
    for h in horizons:
        rules = [r for r in model.rules.values() if r.horizon_id == h.id and r.mid is not None]
        if rules:
            tops = model.ages(np.vstack([r.top for r in rules]))
            bottoms = model.ages(np.vstack([r.bottom for r in rules]))
            out[h.id] = (tops.reshape(model.draws, -1).min(axis=1), bottoms.reshape(model.draws, -1).max(axis=1))
    return out


@dataclass(frozen=True)
class HorizonAge:
    horizon_id: uuid.UUID
    code: str
    label: str
    order: int
    units: str  # its units' codes
    how: str  # how its units' ages were found (dated, interpolated, extrapolated)
    age: AgeSummary | None  # the middle of its span, draw by draw
    youngest: AgeSummary | None  # its top
    oldest: AgeSummary | None  # its base
    rests_on: str
    note: str


def horizon_ages(model: AgeModel, horizons: list[Horizon]) -> list[HorizonAge]:
    """Each horizon's age (the middle of its span in each draw), its youngest and oldest, top to bottom."""
    spans = horizon_draws(model, horizons)
    out = []
    for h in sorted(horizons, key=lambda h: h.order):
        rules = sorted((r for r in model.rules.values() if r.horizon_id == h.id), key=lambda r: r.code)
        missing = [r for r in rules if r.mid is None]
        note = "; ".join(f"unit {r.code} has no age ({r.note.removeprefix('no age: ')})" for r in missing)
        if not rules:
            note = "no unit is in this horizon"
        elif len(missing) == len(rules) and model.problem:
            note = model.problem
        hows = sorted({r.how for r in rules if r.how})
        if h.id not in spans:
            out.append(HorizonAge(h.id, h.code, h.label, h.order, " ".join(r.code for r in rules), ", ".join(hows),
                                  None, None, None, "", note))
            continue
        young, old = spans[h.id]
        q = summarise(np.column_stack([(young + old) / 2, young, old]))
        out.append(HorizonAge(h.id, h.code, h.label, h.order, " ".join(r.code for r in rules), ", ".join(hows),
                              AgeSummary.of(q[:, 0]), AgeSummary.of(q[:, 1]), AgeSummary.of(q[:, 2]),
                              model.rests_on(w for r in rules for w in (r.top, r.bottom)), note))
    return out


@dataclass(frozen=True)
class FindAges:
    """Per find (in the order given): where it sits in its unit (0 top, 1 base), how, and its age (ka)."""

    fraction: F
    how: list[str]
    quantiles: F  # (5, finds): QUANTILES; NaN where there is no age


_F_GRID = np.linspace(0.0, 1.0, 41)


def find_ages(model: AgeModel, unit_id: Sequence[uuid.UUID | None], e: ArrayLike, n: ArrayLike, z: ArrayLike,
              *, spit_mid_z: ArrayLike | None = None) -> FindAges:
    """Each find's age from its Z between its unit's top and bottom surfaces at its own E/N, linear between the
    unit's top and bottom ages draw by draw. A find with no point takes its spit's mid Z (sieved finds), else
    the unit's middle. The quantiles are read off each unit's quantile curves over 41 positions in the unit."""
    e, n, z = (np.atleast_1d(np.asarray(v, dtype=float)) for v in (e, n, z))
    spit = np.full(len(z), np.nan) if spit_mid_z is None else np.asarray(spit_mid_z, dtype=float)
    frac = np.full(len(z), np.nan)
    how = [""] * len(z)
    quant = np.full((len(QUANTILES), len(z)), np.nan)
    idx: dict[uuid.UUID | None, list[int]] = {}
    for i, u in enumerate(unit_id):
        idx.setdefault(u, []).append(i)
    for u, rows in idx.items():
        rule = model.rules.get(u) if u is not None else None
        if rule is None or rule.top is None or rule.bottom is None:
            for i in rows:
                how[i] = rule.note if rule is not None else "no age: the find's unit is not recorded"
            continue
        sel = np.asarray(rows)
        f, says = _fractions(model, u, e[sel], n[sel], z[sel], spit[sel])
        a, b = model.ages(rule.top), model.ages(rule.bottom)
        curve = summarise(a[:, None] + _F_GRID[None, :] * (b - a)[:, None])
        for k in range(len(QUANTILES)):
            quant[k, sel] = np.interp(f, _F_GRID, curve[k])
        frac[sel] = f
        for i, s in zip(rows, says):
            how[i] = s
    return FindAges(frac, how, quant)


def _fractions(model: AgeModel, unit: uuid.UUID, e: F, n: F, z: F, spit: F) -> tuple[F, list[str]]:
    top, bottom = model.surfaces.get((unit, "top")), model.surfaces.get((unit, "bottom"))
    zz = np.where(np.isfinite(z), z, spit)
    have = np.isfinite(zz)
    if top is None or bottom is None:
        return np.full(len(z), 0.5), ["unit middle (its surfaces are not levelled)"] * len(z)
    ee = np.where(np.isfinite(e), e, float(top.points[:, 0].mean()))
    nn = np.where(np.isfinite(n), n, float(top.points[:, 1].mean()))
    zt, zb = top.z_at(ee, nn)[0], bottom.z_at(ee, nn)[0]
    thick = zt - zb
    raw = np.divide(zt - zz, thick, out=np.full(len(z), 0.5), where=(thick > EPS_Z) & have)
    says = ["unit middle (no Z)" if not have[i]
            else "Z outside its unit (taken at the nearer surface)" if raw[i] < -1e-9 or raw[i] > 1 + 1e-9
            else "spit middle" if not np.isfinite(z[i]) else "Z in its unit" for i in range(len(z))]
    return np.clip(raw, 0.0, 1.0), says


def age_depth_curve(model: AgeModel, trench_id: uuid.UUID, z: ArrayLike) -> F:
    """Quantiles (5, len(z)) of the trench's age at each elevation; NaN where it has none."""
    z = np.atleast_1d(np.asarray(z, dtype=float))
    line = model.lines.get(trench_id)
    out = np.full((len(QUANTILES), len(z)), np.nan)
    if line is None:
        return out
    rows = [(i, line.at(float(v), model.site_rate)[0]) for i, v in enumerate(z)]
    rows = [(i, w) for i, w in rows if w is not None]
    if rows:
        out[:, [i for i, _ in rows]] = summarise(model.ages(np.vstack([w for _, w in rows])).reshape(model.draws, -1))
    return out


def horizon_depths(model: AgeModel, horizons: list[Horizon]) -> dict[uuid.UUID, float]:
    """Each horizon's depth (m): its units' mid-depths below the top of their trench's uppermost unit, averaged
    per trench, then over trenches."""
    tops: dict[uuid.UUID, float] = {}
    for r in model.rules.values():
        if r.top_z is not None:
            tops[r.trench_id] = max(tops.get(r.trench_id, -math.inf), r.top_z)
    out = {}
    for h in horizons:
        per: dict[uuid.UUID, list[float]] = {}
        for r in model.rules.values():
            if r.horizon_id == h.id and r.mid_z is not None:
                per.setdefault(r.trench_id, []).append(tops[r.trench_id] - r.mid_z)
        if per:
            out[h.id] = float(np.mean([np.mean(v) for v in per.values()]))
    return out


# -- a proxy series over the horizons ---------------------------------------------------------------------------
@dataclass(frozen=True)
class SeriesSummary:
    """A series summarised over one horizon's age span: each statistic's median over the draws; the mean's
    95 % interval over the draws carries the age uncertainty."""

    horizon_id: uuid.UUID
    draws_with_points: int
    points: float
    mean: float | None
    mean_lo95: float | None
    mean_hi95: float | None
    sd: float | None
    min: float | None
    max: float | None


def _range_table(v: F, op: np.ufunc) -> list[F]:
    levels = [v]
    while 2 ** len(levels) <= len(v):
        prev, step = levels[-1], 2 ** (len(levels) - 1)
        levels.append(op(prev[:-step], prev[step:]))
    return levels


def _range_query(levels: list[F], lo: NDArray[np.int64], hi: NDArray[np.int64], op: np.ufunc) -> F:
    """``op`` over v[lo:hi] for each pair (hi > lo), from a sparse table: O(1) per query."""
    k = np.floor(np.log2(np.maximum(hi - lo, 1))).astype(int)
    out = np.empty(len(lo))
    for level in np.unique(k):
        s = k == level
        out[s] = op(levels[level][lo[s]], levels[level][hi[s] - 2**level])
    return out


def series_by_horizon(spans: dict[uuid.UUID, tuple[F, F]], age_ka: ArrayLike, value: ArrayLike) -> list[SeriesSummary]:
    """For each horizon's (youngest, oldest) draws: the points of the series whose age falls in the span, draw by
    draw, summarised as count, mean, standard deviation (n - 1), min and max; then medians over the draws."""
    a, v = np.asarray(age_ka, dtype=float), np.asarray(value, dtype=float)
    order = np.argsort(a, kind="stable")
    a, v = a[order], v[order]
    c1, c2 = np.concatenate([[0.0], np.cumsum(v)]), np.concatenate([[0.0], np.cumsum(v * v)])
    mins, maxs = (_range_table(v, np.minimum), _range_table(v, np.maximum)) if len(v) else ([], [])
    out = []
    for h, (young, old) in spans.items():
        lo, hi = np.searchsorted(a, young, "left"), np.searchsorted(a, old, "right")
        count = hi - lo
        has = count > 0
        if not has.any():
            out.append(SeriesSummary(h, 0, 0.0, None, None, None, None, None, None))
            continue
        lo, hi, k = lo[has], hi[has], count[has].astype(float)
        s1, s2 = c1[hi] - c1[lo], c2[hi] - c2[lo]
        mean = s1 / k
        var = np.where(k > 1, (s2 - k * mean**2) / np.maximum(k - 1, 1), np.nan)
        sd = np.sqrt(np.maximum(var, 0.0))
        q_mean = np.quantile(mean, (0.025, 0.5, 0.975))
        out.append(SeriesSummary(
            h, int(has.sum()), float(np.median(count)), float(q_mean[1]), float(q_mean[0]), float(q_mean[2]),
            float(np.median(sd[k > 1])) if (k > 1).any() else None,
            float(np.median(_range_query(mins, lo, hi, np.minimum))),
            float(np.median(_range_query(maxs, lo, hi, np.maximum)))))
    return out
