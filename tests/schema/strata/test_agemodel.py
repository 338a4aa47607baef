"""The age model and the stratigraphic ranges, pure. Each main computation is checked against something outside
it, named beside the check: scipy's normal functions, numerical integration of the same distribution with scipy,
plain rejection sampling (the definition of the order-constrained draws), the published range formulas computed
independently and a simulation of their own assumption."""

from __future__ import annotations

import datetime as dt
import math
import uuid

import numpy as np
import pytest
from scipy import integrate, optimize, special, stats

from schema.demo_site import build_site
from schema.records import AgeDetermination, Horizon, LevelPoint, Relation, Site, Trench, Unit
from schema.strata.agemodel import (
    QUANTILES, SWEEPS, combine_dates, find_ages, fit_age_model, horizon_ages, horizon_depths, horizon_draws, norm_cdf,
    norm_ppf, plan_ages, sample_ordered, series_by_horizon, summarise, unit_ages,
)
from schema.strata.data import SiteData
from schema.strata.ranges import alpha_both_ends, alpha_one_end, stratigraphic_ranges

N = 10_000


# -- a small site: units stacked in trenches, flat surfaces -----------------------------------------------------
class _Site:
    def __init__(self) -> None:
        self.site = Site(code="T", name="Test site", crs_epsg=32736)
        self.trenches: dict[str, Trench] = {}
        self.units: dict[str, Unit] = {}
        self.levels: list[LevelPoint] = []
        self.relations: list[Relation] = []
        self.ages: list[AgeDetermination] = []
        self.horizons: dict[str, Horizon] = {}

    def horizon(self, code: str, order: int) -> Horizon:
        self.horizons[code] = Horizon(site_id=self.site.id, code=code, label=f"horizon {code}", order=order)
        return self.horizons[code]

    def unit(self, code: str, trench: str, top: float | None, bottom: float | None, horizon: str | None = None,
             kind: str = "deposit") -> Unit:
        if trench not in self.trenches:
            x0 = 10.0 * len(self.trenches)
            self.trenches[trench] = Trench(site_id=self.site.id, code=trench,
                                           outline=[(x0, 0.0), (x0 + 2, 0.0), (x0 + 2, 2.0), (x0, 2.0)])
        t = self.trenches[trench]
        u = Unit(site_id=self.site.id, trench_id=t.id, code=code, kind=kind, opened_on=dt.date(2026, 7, 1), recorder="AK",
                 horizon_id=self.horizons[horizon].id if horizon else None)
        self.units[code] = u
        for surface, z in (("top", top), ("bottom", bottom)):
            if z is not None:
                self.levels += [LevelPoint(unit_id=u.id, surface=surface, e=e, n=n, z=z) for e, n in t.outline]
        return u

    def above(self, upper: str, lower: str, kind: str = "above") -> None:
        self.relations.append(Relation(site_id=self.site.id, upper_unit_id=self.units[upper].id,
                                       lower_unit_id=self.units[lower].id, kind=kind))

    def date(self, unit: str, age: float, sigma: float, lab: str) -> AgeDetermination:
        a = AgeDetermination(site_id=self.site.id, unit_id=self.units[unit].id, method="argon_argon", age_ka=age,
                             sigma_ka=sigma, lab_code=lab)
        self.ages.append(a)
        return a

    def data(self) -> SiteData:
        return SiteData(site=self.site, trenches=list(self.trenches.values()), units=list(self.units.values()),
                        relations=self.relations, horizons=list(self.horizons.values()), level_points=self.levels,
                        ages=self.ages)


def _column(model, unit_code: str, site: _Site) -> np.ndarray:  # type: ignore[no-untyped-def]
    rule = model.rules[site.units[unit_code].id]
    return model.ages(rule.mid)


# -- the normal functions ---------------------------------------------------------------------------------------
def test_normal_functions_agree_with_scipy() -> None:
    x = np.linspace(-37, 8, 20_001)
    # outside: scipy.special.ndtr / ndtri (Cephes); relative errors as the approximations promise
    assert np.max(np.abs(norm_cdf(x) - special.ndtr(x)) / special.ndtr(x)) < 2e-7
    p = np.concatenate([np.logspace(-300, -2, 500), np.linspace(0.01, 0.99, 999), 1 - np.logspace(-15, -2, 200)])
    assert np.max(np.abs(norm_ppf(p) - special.ndtri(p)) / np.abs(special.ndtri(p)).clip(1e-12)) < 2e-9


# -- the sampler ------------------------------------------------------------------------------------------------
def test_no_order_reproduces_the_dates_own_distributions() -> None:
    """Outside: scipy.stats.norm, by the Kolmogorov-Smirnov test, and the mean and sd within Monte Carlo error."""
    s = _Site()
    s.unit("A", "T1", 10.0, 9.0)
    s.unit("B", "T2", 10.0, 9.0)  # another trench, no relation, no horizon: nothing orders A and B
    s.date("A", 1000.0, 10.0, "L-A")
    s.date("B", 995.0, 20.0, "L-B")
    model = fit_age_model(s.data(), draws=N)
    assert model.left_out == [] and len(model.anchors) == 2
    for code, mu, sd in (("A", 1000.0, 10.0), ("B", 995.0, 20.0)):
        draws = _column(model, code, s)
        assert abs(draws.mean() - mu) < 4 * sd / math.sqrt(N)
        assert draws.std(ddof=1) == pytest.approx(sd, rel=4 * math.sqrt(2 / N))
        assert stats.kstest(draws, stats.norm(mu, sd).cdf).pvalue > 0.001


def _ordered_pair_by_quadrature(mu: tuple[float, float], sd: tuple[float, float]) -> dict[str, float]:
    """The bivariate normal of two independent dates truncated to the ordered half-plane (the upper, younger one
    below the lower, older one), integrated numerically with scipy: the normaliser, the means and the variances."""
    (m1, m2), (s1, s2) = mu, sd
    lo, hi = min(m1, m2) - 10 * max(s1, s2), max(m1, m2) + 10 * max(s1, s2)

    def pdf(x: float, y: float) -> float:  # the two independent normals' joint density
        return math.exp(-0.5 * (((x - m1) / s1) ** 2 + ((y - m2) / s2) ** 2)) / (2 * math.pi * s1 * s2)

    def moment(f):  # type: ignore[no-untyped-def]
        # x: the younger (upper) date, y: the older (lower) one, y from x to hi
        return integrate.dblquad(lambda y, x: f(x, y) * pdf(x, y), lo, hi, lambda x: x, lambda x: hi,
                                 epsabs=1e-13, epsrel=1e-9)[0]

    z = moment(lambda x, y: 1.0)
    ex, ey = moment(lambda x, y: x) / z, moment(lambda x, y: y) / z
    return {"z": z, "mean_upper": ex, "mean_lower": ey, "var_upper": moment(lambda x, y: (x - ex) ** 2) / z,
            "var_lower": moment(lambda x, y: (y - ey) ** 2) / z}


def test_two_dated_units_in_order_against_numerical_integration() -> None:
    """Outside: the same distribution integrated with scipy.integrate.dblquad, and each marginal's distribution
    function by scipy.integrate.quad; the two dates overlap the wrong way round, so the order bites."""
    s = _Site()
    s.unit("U", "T1", 10.0, 9.5)
    s.unit("L", "T1", 9.5, 9.0)
    s.above("U", "L")
    s.date("U", 1010.0, 12.0, "L-U")  # the upper unit's date is older than the lower one's, within 2 sigma
    s.date("L", 1000.0, 8.0, "L-L")
    model = fit_age_model(s.data(), draws=N)
    assert model.left_out == []
    upper, lower = _column(model, "U", s), _column(model, "L", s)
    assert (upper < lower).all()
    ref = _ordered_pair_by_quadrature((1010.0, 1000.0), (12.0, 8.0))
    # the normaliser is also P(x < y) for two normals: a closed form to check the quadrature itself
    assert ref["z"] == pytest.approx(special.ndtr(-10.0 / math.hypot(12.0, 8.0)), rel=1e-8)
    for draws, which in ((upper, "upper"), (lower, "lower")):
        var = ref[f"var_{which}"]
        assert abs(draws.mean() - ref[f"mean_{which}"]) < 4 * math.sqrt(var / N)
        assert draws.var(ddof=1) == pytest.approx(var, rel=4 * math.sqrt(2 / N) * 1.5)
    # marginal distribution function of the upper date at a few points (binomial Monte Carlo error)
    for x in np.quantile(upper, (0.05, 0.25, 0.5, 0.75, 0.95)):
        inner = lambda t: stats.norm.pdf(t, 1010.0, 12.0) * stats.norm.sf(t, 1000.0, 8.0)  # noqa: E731
        cdf = integrate.quad(inner, 850.0, x, epsabs=1e-13)[0] / ref["z"]
        assert abs(np.mean(upper <= x) - cdf) < 4 * math.sqrt(cdf * (1 - cdf) / N)


def _chain_marginals(mu: np.ndarray, sd: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Means and variances of each date of a column ordered youngest first, x_1 < x_2 < ... < x_n, by numerical
    integration on a fine grid (forward and backward cumulative integrals, scipy.integrate.cumulative_trapezoid):
    p(x_k) is proportional to N_k(x_k) P(x_1 < ... < x_k-1 < x_k) P(x_k < x_k+1 < ... < x_n)."""
    g = np.linspace(mu.min() - 12 * sd.max(), mu.max() + 12 * sd.max(), 80_001)
    lik = np.array([stats.norm.pdf(g, m, s) for m, s in zip(mu, sd)])
    n = len(mu)
    fwd, bwd = [np.ones_like(g)], [np.ones_like(g)]
    for k in range(1, n):
        f = integrate.cumulative_trapezoid(lik[k - 1] * fwd[-1], g, initial=0)
        fwd.append(f / f[-1])
    for k in range(n - 2, -1, -1):
        t = (lik[k + 1] * bwd[0])[::-1]
        c = integrate.cumulative_trapezoid(t, -g[::-1], initial=0)[::-1]
        bwd.insert(0, c / c[0])
    means, variances = [], []
    for k in range(n):
        d = lik[k] * fwd[k] * bwd[k]
        d /= integrate.trapezoid(d, g)
        m = integrate.trapezoid(g * d, g)
        means.append(m)
        variances.append(integrate.trapezoid((g - m) ** 2 * d, g))
    return np.asarray(means), np.asarray(variances)


def test_twenty_overlapping_dates_in_a_column_mix_with_the_default_sweeps() -> None:
    """Plain rejection keeps nothing here (order acceptance 0); the Gibbs draws match the marginals integrated
    numerically (outside: scipy.integrate)."""
    rng = np.random.default_rng(5)
    mu, sd = np.sort(rng.normal(1000, 15, 20)), rng.uniform(3, 20, 20)
    d = sample_ordered(mu, sd, [(i, i + 1) for i in range(19)], draws=N, seed=1, sweeps=SWEEPS)
    assert d.order_acceptance < 0.001 and d.sweeps == SWEEPS
    assert (np.diff(d.theta, axis=1) > 0).all()
    means, variances = _chain_marginals(mu, sd)
    z = (d.theta.mean(axis=0) - means) / np.sqrt(variances / N)
    assert np.abs(z).max() < 4.0, z
    assert np.allclose(d.theta.var(axis=0, ddof=1) / variances, 1.0, atol=0.06)


def test_equal_dates_in_a_column_are_their_order_statistics() -> None:
    """n equal normal dates in a column: the k-th is the k-th order statistic of n normals, whose distribution
    function is the regularised incomplete beta I_F(k, n - k + 1) (outside: scipy.special.betainc)."""
    n = 12
    d = sample_ordered(np.full(n, 50.0), np.full(n, 5.0), [(i, i + 1) for i in range(n - 1)], draws=N, seed=3)
    for k in (0, 3, 6, 11):
        x = np.quantile(d.theta[:, k], (0.1, 0.5, 0.9))
        exact = special.betainc(k + 1, n - k, stats.norm.cdf(x, 50.0, 5.0))
        assert np.abs(exact - (0.1, 0.5, 0.9)).max() < 4 * math.sqrt(0.25 / N)


def test_a_partial_order_matches_plain_rejection() -> None:
    """Two branches joined above and below, a cross link and a side branch; outside: the definition itself,
    plain rejection of unconstrained draws (two-sample Kolmogorov-Smirnov per date)."""
    mu, sd = np.array([100, 104, 103, 110, 99, 106, 101.0]), np.array([3, 5, 2, 6, 4, 3, 8.0])
    pairs = [(0, 1), (1, 2), (2, 3), (0, 4), (4, 5), (5, 3), (1, 5), (4, 6)]
    rng = np.random.default_rng(3)
    kept = []
    while sum(len(k) for k in kept) < N:
        x = mu + sd * rng.standard_normal((200_000, 7))
        kept.append(x[np.all([x[:, i] < x[:, j] for i, j in pairs], axis=0)])
    ref = np.concatenate(kept)[:N]
    d = sample_ordered(mu, sd, pairs, draws=N, seed=2)
    assert 0.01 < d.order_acceptance < 0.06  # what plain rejection keeps here
    assert min(stats.ks_2samp(d.theta[:, k], ref[:, k]).pvalue for k in range(7)) > 0.001


def test_the_draws_are_seeded() -> None:
    args = (np.array([10.0, 11.0, 12.0]), np.array([1.0, 2.0, 1.0]), [(0, 1), (1, 2)])
    a, b = sample_ordered(*args, draws=500, seed=7), sample_ordered(*args, draws=500, seed=7)
    assert np.array_equal(a.theta, b.theta)
    assert not np.array_equal(a.theta, sample_ordered(*args, draws=500, seed=8).theta)
    s = _Site()
    s.unit("A", "T1", 10.0, 9.0)
    s.date("A", 5.0, 1.0, "L")
    assert np.array_equal(fit_age_model(s.data(), draws=300).theta, fit_age_model(s.data(), draws=300).theta)


def test_the_sampler_refuses_what_it_cannot_sample() -> None:
    with pytest.raises(ValueError, match="go round in a circle"):
        sample_ordered([1.0, 2.0], [1.0, 1.0], [(0, 1), (1, 0)])
    with pytest.raises(ValueError, match="every sigma above 0"):
        sample_ordered([1.0], [0.0], [])
    with pytest.raises(ValueError, match=r"the pair \(0, 5\) does not name two different dates of the 2 given"):
        sample_ordered([1.0, 2.0], [1.0, 1.0], [(0, 5)])


def test_summarise_gives_the_reported_quantiles() -> None:
    q = summarise(np.arange(1001.0)[:, None])
    assert np.allclose(q[:, 0], np.asarray(QUANTILES) * 1000)


# -- dates left out and combined --------------------------------------------------------------------------------
def test_a_contradicting_date_is_left_out_with_the_reason() -> None:
    s = _Site()
    for code, top in (("1", 10.0), ("2", 9.5), ("3", 9.0)):
        s.unit(code, "T1", top, top - 0.5)
    s.above("1", "2")
    s.above("2", "3")
    s.date("1", 1100.0, 5.0, "BAD")  # older than both dates below it, beyond both 2-sigma ranges
    s.date("2", 1000.0, 5.0, "OK-2")
    s.date("3", 1010.0, 5.0, "OK-3")
    model = fit_age_model(s.data(), draws=500)
    (out,) = model.left_out
    assert (out.lab_code, out.unit) == ("BAD", "1")
    assert out.reason.startswith("unit 1 is dated 1100 +- 5 ka but lies above unit 2, dated 1000 +- 5 ka: the upper "
                                 "date is older beyond both 2-sigma ranges; unit 1 is dated 1100 +- 5 ka but lies "
                                 "above unit 3")
    assert "Left out of the age model: it contradicts 2 other dates in the order; check for reworked" in out.reason
    assert [a.name for a in model.anchors] == ["2 (OK-2)", "3 (OK-3)"]
    assert next(u for u in unit_ages(model) if u.code == "1").how == "extrapolated"  # by depth, like any undated unit


def test_dates_on_one_unit_are_combined_or_left_out_when_they_disagree() -> None:
    mean, sigma, t, critical = combine_dates([100.0, 104.0], [2.0, 4.0])
    w = np.array([1 / 4, 1 / 16])  # inverse variances, by hand
    assert mean == pytest.approx((w * [100, 104]).sum() / w.sum()) and sigma == pytest.approx(1 / math.sqrt(w.sum()))
    assert t == pytest.approx(((100 - mean) / 2) ** 2 + ((104 - mean) / 4) ** 2) and critical == 3.841
    for df in range(1, 40):  # outside: scipy.stats.chi2 (table to 10, Wilson-Hilferty beyond)
        assert combine_dates(np.zeros(df + 1), np.ones(df + 1))[3] == pytest.approx(stats.chi2.ppf(0.95, df), rel=2e-3)
    s = _Site()
    s.unit("A", "T1", 10.0, 9.0)
    s.unit("B", "T2", 10.0, 9.0)
    s.date("A", 100.0, 2.0, "A1")
    s.date("A", 104.0, 4.0, "A2")
    s.date("B", 100.0, 1.0, "B1")
    s.date("B", 120.0, 1.0, "B2")
    model = fit_age_model(s.data(), draws=500)
    assert [a.name for a in model.anchors] == ["A (A1, A2)"] and model.anchors[0].age_ka == pytest.approx(mean)
    assert sorted(x.lab_code for x in model.left_out) == ["B1", "B2"]
    assert model.left_out[0].reason == ("the 2 dates on unit B (B1, B2) disagree with one another (T = 200.00 above "
                                        "the 95 % chi-square value 3.84): all are left out; check the samples and "
                                        "keep the ones you trust")


# -- ages by depth ----------------------------------------------------------------------------------------------
def _stack() -> _Site:
    """T1: A (10.0-9.6), B (9.6-9.0), C (9.0-8.8), D (8.8-8.0); A above B above C above D; dates on B and D.
    T2: E over F, F same as B (dated through it)."""
    s = _Site()
    for code, order in (("H1", 1), ("H2", 2), ("H3", 3), ("H4", 4)):
        s.horizon(code, order)
    for code, top, bottom, h in (("A", 10.0, 9.6, "H1"), ("B", 9.6, 9.0, "H2"), ("C", 9.0, 8.8, "H3"), ("D", 8.8, 8.0, "H4")):
        s.unit(code, "T1", top, bottom, h)
    s.unit("E", "T2", 20.0, 19.0, "H1")
    s.unit("F", "T2", 19.0, 18.0, "H2")
    s.above("A", "B")
    s.above("B", "C")
    s.above("C", "D")
    s.above("E", "F")
    s.above("F", "B", kind="same_as")
    s.date("B", 500.0, 5.0, "LB")
    s.date("D", 560.0, 10.0, "LD")
    return s


def test_undated_units_take_ages_by_depth_draw_by_draw() -> None:
    s = _stack()
    model = fit_age_model(s.data(), draws=2000)
    b, d = (model.theta[:, [a.label for a in model.anchors].index(code)] for code in ("B=F", "D"))
    rate = (d - b) / (9.3 - 8.4)  # ka per metre between the dated mid-depths, in each draw (by hand)
    ages = {u.code: u for u in unit_ages(model)}
    assert {c: u.how for c, u in ages.items()} == {"A": "extrapolated", "B": "dated", "C": "interpolated", "D": "dated",
                                                   "E": "extrapolated", "F": "dated"}
    assert np.allclose(_column(model, "C", s), b + (9.3 - 8.9) * rate)
    assert np.allclose(_column(model, "A", s), b - (9.8 - 9.3) * rate)  # above the uppermost date: the trench's rate
    assert np.allclose(_column(model, "E", s), b - (19.5 - 18.5) * rate)  # one date in T2: the site's rate
    assert np.allclose(model.ages(model.rules[s.units["C"].id].top), b + (9.3 - 9.0) * rate)
    assert ages["C"].rests_on == "B=F (LB); D (LD)"
    assert (np.diff(np.column_stack([_column(model, c, s) for c in "ABCD"]), axis=1) > 0).all()


def test_units_without_a_dated_trench_take_their_horizons_age_and_others_say_why_not() -> None:
    s = _stack()
    s.unit("G", "T3", 5.0, 4.0, "H3")  # no date in T3: its horizon's age
    s.unit("K", "T4", None, None)  # no level points, no horizon
    model = fit_age_model(s.data(), draws=500)
    g = model.rules[s.units["G"].id]
    assert g.how == "horizon" and np.allclose(g.mid, model.rules[s.units["C"].id].mid)
    assert g.note == "its horizon's mean age (trench T3 has no dated unit with level points)"
    k = next(u for u in unit_ages(model) if u.code == "K")
    assert k.age is None and k.note == "no age: it has no level points on its top and bottom surfaces, so its depth is unknown"
    one = _Site()
    one.unit("X", "T1", 10.0, 9.0)
    one.unit("Y", "T1", 9.0, 8.0)
    one.date("X", 10.0, 1.0, "LX")
    y = next(u for u in unit_ages(fit_age_model(one.data(), draws=200)) if u.code == "Y")
    assert y.age is None and y.note == ("no age: it lies below the lowest dated unit of trench T1, and no trench has two "
                                        "dated units at different depths to give an accumulation rate")


def test_a_cycle_and_a_horizon_order_against_the_matrix_are_named_not_fatal() -> None:
    s = _stack()
    s.above("D", "A")  # typed the wrong way round: A, B, C, D go round in a circle
    model = fit_age_model(s.data(), draws=500)
    assert model.problem is None and all(u.age is not None for u in unit_ages(model))
    assert model.notes[0].startswith("the relations among units A, B=F, C, D go round in a circle")
    s = _stack()
    s.units["A"] = s.units["A"].model_copy(update={"horizon_id": s.horizons["H4"].id})  # A above B, but in H4
    model = fit_age_model(s.data(), draws=500)
    assert model.notes == ["the horizon order disagrees with the matrix (see the HORIZON_ORDER checks): the ages use "
                           "the matrix's order alone"]
    assert fit_age_model(_Site().data()).problem == ("no laboratory date: add dates with baulk date add or baulk date "
                                                     "import")


def test_the_horizon_order_orders_dates_the_matrix_leaves_apart() -> None:
    s = _Site()
    s.horizon("H1", 1)
    s.horizon("H2", 2)
    s.unit("A", "T1", 10.0, 9.0, "H1")
    s.unit("B", "T2", 10.0, 9.0, "H2")  # no relation between the trenches: only the horizons order A over B
    s.date("A", 1000.0, 10.0, "LA")
    s.date("B", 995.0, 10.0, "LB")
    plan = plan_ages(s.data())
    assert plan.pairs == [(0, 1)]
    model = fit_age_model(s.data(), draws=2000)
    assert (model.theta[:, 0] < model.theta[:, 1]).all()


def test_find_ages_follow_their_z_within_the_unit() -> None:
    s = _stack()
    model = fit_age_model(s.data(), draws=2000)
    c = s.units["C"]
    top, bottom = (model.ages(getattr(model.rules[c.id], k)) for k in ("top", "bottom"))
    fa = find_ages(model, [c.id] * 5, [0.5, 0.5, 0.5, 0.5, np.nan], [0.5] * 4 + [np.nan], [9.0, 8.8, 8.95, 9.3, np.nan],
                   spit_mid_z=[np.nan] * 4 + [8.85])
    assert np.allclose(fa.fraction, [0.0, 1.0, 0.25, 0.0, 0.75])
    assert fa.how == ["Z in its unit", "Z in its unit", "Z in its unit", "Z outside its unit (taken at the nearer surface)",
                      "spit middle"]
    assert np.allclose(fa.quantiles[:, 0], summarise(top))
    assert np.allclose(fa.quantiles[:, 1], summarise(bottom))
    assert np.allclose(fa.quantiles[2, 2], np.median(top + 0.25 * (bottom - top)), atol=0.05)
    none = find_ages(model, [c.id, uuid.uuid4()], [np.nan] * 2, [np.nan] * 2, [np.nan] * 2)
    assert none.how == ["unit middle (no Z)", "no age: the find's unit is not recorded"] and np.isnan(none.quantiles[:, 1]).all()


def test_the_demo_sites_dates_give_every_horizon_an_age() -> None:
    demo = build_site()
    data = SiteData(site=demo.site, trenches=list(demo.trenches.values()), units=list(demo.units.values()),
                    relations=demo.relations, horizons=list(demo.horizons.values()), level_points=demo.level_points,
                    ages=demo.ages)
    model = fit_age_model(data)
    ages = {h.code: h for h in horizon_ages(model, data.horizons)}
    assert all(h.age is not None for h in ages.values())
    assert ages["H2"].how == "dated" and ages["H2"].age.median_ka == pytest.approx(1871.0, abs=0.5)  # type: ignore[union-attr]
    medians = [ages[c].age.median_ka for c in ("H1", "H2", "H3", "H4")]  # type: ignore[union-attr]
    assert medians == sorted(medians)
    depth = horizon_depths(model, data.horizons)
    # by hand from schema/demo_site.py UNITS: H1 is 101 (mid 0.175 m down TR1), 201 and 203 (0.15, 0.425 in TR2),
    # 301 (0.15 in TR3); H2 is 102 (0.45), 204 (0.65), 302 (0.425): per trench, then over trenches
    assert depth[demo.horizons["H1"].id] == pytest.approx((0.175 + (0.15 + 0.425) / 2 + 0.15) / 3)
    assert depth[demo.horizons["H2"].id] == pytest.approx((0.45 + 0.65 + 0.425) / 3)


# -- a series over the horizons ---------------------------------------------------------------------------------
def test_series_by_horizon_matches_a_loop_over_the_draws() -> None:
    rng = np.random.default_rng(4)
    ages, values = rng.uniform(0, 100, 300), rng.normal(0, 1, 300)
    young, old = rng.uniform(10, 40, 200), rng.uniform(50, 70, 200)
    h = uuid.uuid4()
    (got,) = series_by_horizon({h: (young, old)}, ages, values)
    stats_ = []
    for y, o in zip(young, old):  # outside: the plain loop, numpy on each draw's points
        v = values[(ages >= y) & (ages <= o)]
        stats_.append((len(v), v.mean(), v.std(ddof=1), v.min(), v.max()))
    n, mean, sd, lo, hi = np.asarray(stats_).T
    assert (got.draws_with_points, got.points) == (200, np.median(n))
    assert (got.mean, got.sd, got.min, got.max) == pytest.approx((np.median(mean), np.median(sd), np.median(lo), np.median(hi)))
    assert (got.mean_lo95, got.mean_hi95) == pytest.approx(tuple(np.quantile(mean, (0.025, 0.975))))
    (empty,) = series_by_horizon({h: (young, old)}, [500.0], [1.0])
    assert empty.draws_with_points == 0 and empty.mean is None


# -- stratigraphic ranges ---------------------------------------------------------------------------------------
def test_range_intervals_against_the_published_formulas_computed_independently() -> None:
    """Strauss and Sadler 1989; Marshall 1990 (formulas from memory): one end alone alpha = (1 - C)^(-1/(H - 1)) - 1;
    both ends C = 1 - 2(1 + alpha)^-(H - 1) + (1 + 2 alpha)^-(H - 1), solved here with scipy.optimize.brentq."""
    for h in (3, 4, 5, 10, 25):
        for c in (0.5, 0.8, 0.95):
            assert alpha_one_end(h, c) == pytest.approx(math.exp(-math.log(1 - c) / (h - 1)) - 1, rel=1e-12)
            both = optimize.brentq(lambda a: 1 - 2 * (1 + a) ** -(h - 1) + (1 + 2 * a) ** -(h - 1) - c, 1e-12, 1e6,
                                   xtol=1e-14)
            assert alpha_both_ends(h, c) == pytest.approx(both, rel=1e-9)
            assert alpha_both_ends(h, c) > alpha_one_end(h, c)  # two ends need more room than one
    # a hand computation from the formula (not a value read from the papers): H = 10 at 95 %: 20^(1/9) - 1
    assert alpha_one_end(10, 0.95) == pytest.approx(0.39495, abs=1e-5)
    assert alpha_one_end(2) is None and alpha_both_ends(1) is None


def test_range_intervals_cover_the_true_ends_as_often_as_promised() -> None:
    """The formulas' own assumption simulated: H horizons uniform at random over a true range [0, 1]; the upper
    end's interval covers 1 (one end alone), and both intervals cover 0 and 1 (both ends), at rate C."""
    rng = np.random.default_rng(11)
    trials, h, c = 40_000, 6, 0.9
    x = rng.random((trials, h))
    lo, hi = x.min(axis=1), x.max(axis=1)
    r = hi - lo
    one, both = alpha_one_end(h, c), alpha_both_ends(h, c)
    err = 4 * math.sqrt(c * (1 - c) / trials)
    assert abs(np.mean(hi + one * r >= 1) - c) < err  # type: ignore[operator]
    assert abs(np.mean((hi + both * r >= 1) & (lo - both * r <= 0)) - c) < err  # type: ignore[operator]


def test_stratigraphic_ranges_in_horizons_depth_and_ka() -> None:
    hs = [Horizon(site_id=uuid.uuid4(), code=f"H{k}", label=f"h{k}", order=k) for k in range(1, 6)]
    ids = [h.id for h in hs]
    occ = [("taxon", "Bovidae", ids[k]) for k in (1, 2, 4, 4)] + [("taxon", "Suidae", ids[0]), ("taxon", "Suidae", None),
                                                                   ("category", "fossil", ids[3])]
    depth = {h: 0.5 * k for k, h in enumerate(ids)}
    draws = {h: np.full(100, 100.0 + 10 * k) + np.linspace(-1, 1, 100) * k for k, h in enumerate(ids)}
    got = {r.name: r for r in stratigraphic_ranges(occ, hs, depth_m=depth, age_draws=draws)}
    bov = got["Bovidae"]
    a = alpha_one_end(3)
    assert (bov.finds, bov.horizons, bov.first_horizon, bov.last_horizon, bov.range_steps) == (4, 3, "H5", "H2", 3)
    assert bov.range_m == pytest.approx(1.5) and bov.extension_m == pytest.approx(1.5 * a)  # type: ignore[operator]
    assert bov.extension_steps == pytest.approx(3 * a)  # type: ignore[operator]
    span = draws[ids[4]] - draws[ids[1]]
    assert bov.range_ka == pytest.approx(np.median(span)) and bov.extension_ka == pytest.approx(np.median(a * span))  # type: ignore[operator]
    assert bov.first_bound_ka == pytest.approx(np.median(draws[ids[4]] + a * span))  # type: ignore[operator]
    assert bov.last_bound_ka == pytest.approx(np.median(draws[ids[1]] - a * span))  # type: ignore[operator]
    su = got["Suidae"]
    assert su.alpha_one_end is None and su.note == ("1 of its finds are in units with no horizon; found in 1 horizon: "
                                                    "no interval can be given on fewer than three")
    assert got["fossil"].horizons == 1 and got["fossil"].extension_ka is None


def test_horizon_draws_span_their_units() -> None:
    s = _stack()
    model = fit_age_model(s.data(), draws=500)
    spans = horizon_draws(model, list(s.horizons.values()))
    young, old = spans[s.horizons["H1"].id]
    tops = [model.ages(model.rules[s.units[c].id].top) for c in ("A", "E")]
    bottoms = [model.ages(model.rules[s.units[c].id].bottom) for c in ("A", "E")]
    assert np.allclose(young, np.minimum(*tops)) and np.allclose(old, np.maximum(*bottoms))
