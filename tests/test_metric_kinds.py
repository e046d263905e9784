"""Ratio metrics, covariate adjustment and robust counts (seqtest.monitoring.metrics),
checked against outside references named beside each check: statsmodels' least squares
and GLM sandwich variances, plain computations on simulated raw data, Monte Carlo truth
with computed bounds, and the bad input every door must refuse.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import special, stats

import seqtest
from seqtest.core.errors import LookDataError
from seqtest.monitoring.lookfile import read_looks_csv
from seqtest.monitoring.metrics import (
    DISPERSION_LIMIT,
    METRIC_FIELDS,
    _arm_mean_and_variance,
    dispersion_check,
    effect,
    validate_looks,
)

# ---------------------------------------------------------------------------
# Raw data and their totals
# ---------------------------------------------------------------------------


def ratio_units(rng: np.random.Generator, n: int, rate: float, sessions: float = 3.0,
                k: float = 2.0) -> tuple[np.ndarray, np.ndarray]:
    """Per-user clicks (numerator) and sessions (denominator): sessions 1 + Poisson,
    clicks Poisson(sessions x rate x gamma(k) multiplier): users differ, and a user's
    sessions are not independent (the case the delta method is for)."""
    d = 1.0 + rng.poisson(sessions - 1.0, n)
    x = rng.poisson(d * rate * rng.gamma(k, 1.0 / k, n)).astype(float)
    return x, d


def ratio_totals(x: np.ndarray, d: np.ndarray) -> dict:
    return {"n": x.size, "numerator": x.sum(), "denominator": d.sum(),
            "numerator_sq": (x * x).sum(), "denominator_sq": (d * d).sum(),
            "cross": (x * d).sum()}


def adjusted_units(rng: np.random.Generator, n: int, mean: float, sd: float, rho: float
                   ) -> tuple[np.ndarray, np.ndarray]:
    """Outcome y and pre-period covariate x (mean 3, sd 1), correlation rho."""
    x = rng.normal(3.0, 1.0, n)
    y = mean + rho * sd * (x - 3.0) + sd * math.sqrt(1 - rho * rho) * rng.normal(size=n)
    return y, x


def adjusted_totals(y: np.ndarray, x: np.ndarray) -> dict:
    return {"n": y.size, "sum": y.sum(), "sum_sq": (y * y).sum(), "covariate": x.sum(),
            "covariate_sq": (x * x).sum(), "cross": (x * y).sum()}


def count_totals(y: np.ndarray) -> dict:
    return {"n": y.size, "events": y.sum(), "events_sq": (y * y).sum()}


# ---------------------------------------------------------------------------
# Ratio metrics: the delta method
# ---------------------------------------------------------------------------


def test_ratio_variance_is_weighted_least_squares_hc1():
    # Source: statsmodels WLS. The ratio sum(x)/sum(y) is the weighted least-squares
    # slope of x on y through the origin with weights 1/y, and its HC1 sandwich variance
    # sum(e^2)/(sum y)^2 * n/(n-1), e = x - R y, is exactly the delta-method variance of
    # Deng, Knoblich and Lu (2018), (s_x^2 - 2 R s_xy + R^2 s_y^2) / (n mu_y^2).
    rng = np.random.default_rng(11)
    for n in (40, 500, 5_000):
        x, d = ratio_units(rng, n, 0.5)
        a = {k: np.asarray(v, float) for k, v in ratio_totals(x, d).items()}
        _, r, w = _arm_mean_and_variance("ratio", a)
        fit = sm.WLS(x, d, weights=1.0 / d).fit(cov_type="HC1")
        assert r == pytest.approx(fit.params[0], rel=1e-12)
        assert w == pytest.approx(fit.bse[0] ** 2, rel=1e-9)
        # the formula of REFERENCES.md on the raw per-unit data (plain computation)
        c = np.cov(x, d, ddof=1)
        mx, my = x.mean(), d.mean()
        plain = (c[0, 0] / my**2 - 2 * mx * c[0, 1] / my**3 + mx**2 * c[1, 1] / my**4) / n
        assert w == pytest.approx(plain, rel=1e-9)


def test_ratio_standard_error_matches_monte_carlo_spread():
    # Monte Carlo truth: 4,000 experiments of raw per-user data (seeded); the sd of the
    # difference of ratios across experiments against the mean delta-method se. The
    # sample sd of M normal-ish draws has relative sd 1/sqrt(2(M-1)) = 1.12%; bound 4.5%
    # (4 of them; the delta method's own error is O(1/n) = 0.2% at n = 600).
    rng = np.random.default_rng(12)
    m, n = 4_000, 600
    est, se = np.empty(m), np.empty(m)
    for i in range(m):
        c = ratio_totals(*ratio_units(rng, n, 0.5))
        t = ratio_totals(*ratio_units(rng, n, 0.5))
        e = effect("ratio", c, t)
        est[i], se[i] = e.estimate, e.se
    assert np.std(est, ddof=1) / np.mean(se) == pytest.approx(1.0, abs=0.045)
    # the check can fail: a variance that took sessions as independent units (Poisson
    # clicks per session, var(R) = R / sum(d)) is far below the spread seen
    x, d = ratio_units(rng, n, 0.5)
    per_session = 2 * (x.sum() / d.sum()) / d.sum()
    assert np.var(est, ddof=1) > 1.5 * per_session


def test_ratio_with_unit_denominators_is_the_continuous_metric():
    # Fact (algebra): with every denominator 1 the ratio is a mean, and the delta
    # method gives Welch's statistic (scipy.stats.ttest_ind(equal_var=False)).
    rng = np.random.default_rng(13)
    xc, xt = rng.gamma(2.0, 3.0, 300), rng.gamma(2.0, 3.3, 250)
    one_c, one_t = np.ones(300), np.ones(250)
    e = effect("ratio", ratio_totals(xc, one_c), ratio_totals(xt, one_t))
    ref = stats.ttest_ind(xt, xc, equal_var=False)
    assert e.z == pytest.approx(ref.statistic, rel=1e-10)


def test_ratio_relative_scale_runs_on_the_log_ratio():
    # Delta method on log R_t - log R_c: se^2 = w_t / R_t^2 + w_c / R_c^2 (Casella and
    # Berger 2002, 5.5.4), computed here from the WLS variances of statsmodels.
    rng = np.random.default_rng(14)
    (xc, dc), (xt, dt) = ratio_units(rng, 800, 0.5), ratio_units(rng, 800, 0.55)
    e = effect("ratio", ratio_totals(xc, dc), ratio_totals(xt, dt), scale="relative",
               null=0.02)
    fc = sm.WLS(xc, dc, weights=1 / dc).fit(cov_type="HC1")
    ft = sm.WLS(xt, dt, weights=1 / dt).fit(cov_type="HC1")
    rc, rt = fc.params[0], ft.params[0]
    log_se = math.sqrt(fc.bse[0] ** 2 / rc**2 + ft.bse[0] ** 2 / rt**2)
    assert e.estimate == pytest.approx(rt / rc - 1, rel=1e-12)
    assert e.test_se == pytest.approx(log_se, rel=1e-9)
    assert e.z == pytest.approx((math.log(rt / rc) - math.log1p(0.02)) / log_se, rel=1e-9)


def test_ratio_sizing_from_pilot_moments():
    # Standard textbook formula (REFERENCES.md): per-arm n = 2 (z_{1-a/2} + z_{1-b})^2
    # sigma^2 / delta^2 for a one-look plan, with sigma^2 the per-unit delta-method
    # variance of the ratio computed from a pilot's raw per-user data (statsmodels WLS
    # HC1 variance times n: an independent computation of it).
    rng = np.random.default_rng(15)
    x, d = ratio_units(rng, 3_000, 0.5)
    c = np.cov(x, d, ddof=1)
    metric = {"kind": "ratio", "numerator_mean": x.mean(), "denominator_mean": d.mean(),
              "numerator_sd": math.sqrt(c[0, 0]), "denominator_sd": math.sqrt(c[1, 1]),
              "covariance": c[0, 1], "mde": 0.02}
    plan = seqtest.design(alpha=0.05, sides=2, power=0.8, looks=1, metric=metric)
    r = x.mean() / d.mean()
    sigma2 = sm.WLS(x, d, weights=1 / d).fit(cov_type="HC1").bse[0] ** 2 * x.size
    # the treatment multiplies the numerators: its variance is scaled by (R_t / R_c)^2
    unit = sigma2 * (1 + ((r + 0.02) / r) ** 2)
    n = (special.ndtri(0.975) + special.ndtri(0.8)) ** 2 * unit / 0.02**2
    # rel 1e-6: the design's drift is solved to 1e-12, the moments agree to 1e-9
    assert plan.sample_size().n_control == math.ceil(n * (1 - 1e-9))
    assert plan.sample_size().fixed_control == math.ceil(n * (1 - 1e-9))


# ---------------------------------------------------------------------------
# Covariate adjustment
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("n_c, n_t, sd_t", [(400, 400, 1.0), (300, 900, 1.3),
                                            (2_000, 1_500, 0.8)])
def test_adjusted_estimate_is_least_squares_with_a_treatment_indicator(n_c, n_t, sd_t):
    # Source: statsmodels OLS of y on [1, treatment, x]. The treatment coefficient is
    # (ybar_t - ybar_c) - theta (xbar_t - xbar_c) with theta the within-arm pooled slope
    # (Frisch-Waugh), exactly our estimate; theta is the coefficient of x.
    # Variance: HC2, the sandwich that is exactly Welch's variance in the regression on
    # the treatment alone (unequal variances and arm sizes are what experiments have;
    # the pooled OLS variance assumes equal variances and is off by 10% in the second
    # case). Ours treats theta as known (Deng, Xu, Kohavi and Walker 2013), so it differs
    # from HC2 by O(1/n) terms computed here from the data: the leverage of x (HC2
    # divides e_i^2 by 1 - h_i) and theta's own variance, relative (Dx)^2 / (SSx (1/n_c
    # + 1/n_t)); the bound is twice their sum (cross terms).
    rng = np.random.default_rng(n_c + n_t)
    yc, xc = adjusted_units(rng, n_c, 3.0, 1.0, 0.7)
    yt, xt = adjusted_units(rng, n_t, 3.2, sd_t, 0.7)
    e = effect("adjusted", adjusted_totals(yc, xc), adjusted_totals(yt, xt))
    treat = np.r_[np.zeros(n_c), np.ones(n_t)]
    x_all = np.r_[xc, xt]
    design_matrix = np.column_stack([np.ones(n_c + n_t), treat, x_all])
    fit = sm.OLS(np.r_[yc, yt], design_matrix).fit(cov_type="HC2")
    assert e.estimate == pytest.approx(fit.params[1], rel=1e-10, abs=1e-12)
    h = fit.get_influence().hat_matrix_diag
    ssx = ((xc - xc.mean()) ** 2).sum() + ((xt - xt.mean()) ** 2).sum()
    theta_term = (xt.mean() - xc.mean()) ** 2 / (ssx * (1 / n_c + 1 / n_t))
    bound = 2 * (h.max() + theta_term)
    assert bound < 0.05                       # the terms are small, as claimed
    assert abs(fit.bse[1] / e.se - 1) < bound
    # and without the covariate HC2 is Welch exactly (the continuous metric)
    plain = sm.OLS(np.r_[yc, yt], design_matrix[:, :2]).fit(cov_type="HC2")
    w = effect("continuous", {"n": n_c, "sum": yc.sum(), "sum_sq": (yc * yc).sum()},
               {"n": n_t, "sum": yt.sum(), "sum_sq": (yt * yt).sum()})
    assert w.se == pytest.approx(plain.bse[1], rel=1e-10)


def test_adjusted_without_covariate_variation_is_the_continuous_metric():
    # A covariate without variation carries nothing: no adjustment (theta = 0).
    rng = np.random.default_rng(21)
    yc, yt = rng.normal(3, 1, 200), rng.normal(3.1, 1, 220)
    c = adjusted_totals(yc, np.full(200, 5.0))
    t = adjusted_totals(yt, np.full(220, 5.0))
    e = effect("adjusted", c, t)
    ref = stats.ttest_ind(yt, yc, equal_var=False)
    assert e.z == pytest.approx(ref.statistic, rel=1e-9)


def test_adjusted_sizing_takes_the_correlation():
    # Deng, Xu, Kohavi and Walker (2013): the adjusted variance is (1 - rho^2) times the
    # unadjusted one, so the sample size is too (before rounding up).
    for rho in (0.3, 0.7, -0.5):
        base = {"sd": 2.0, "mde": 0.1}
        cont = seqtest.design(alpha=0.05, sides=2, power=0.8, looks=4,
                              metric={"kind": "continuous", **base}).sample_size()
        adj = seqtest.design(alpha=0.05, sides=2, power=0.8, looks=4,
                             metric={"kind": "adjusted", "correlation": rho, **base}
                             ).sample_size()
        n_cont = cont.max_information * 2 * 4.0
        n_adj = adj.max_information * 2 * 4.0 * (1 - rho * rho)
        assert adj.n_control == math.ceil(n_adj * (1 - 1e-12))
        assert n_adj == pytest.approx(n_cont * (1 - rho * rho), rel=1e-12)


# ---------------------------------------------------------------------------
# Counts with a variance that does not assume Poisson
# ---------------------------------------------------------------------------


def test_count_variance_is_the_sandwich_of_least_squares_and_poisson_glm():
    # Sources: statsmodels OLS of the counts on [1, treatment] with HC1 (equal arms:
    # exactly s_t^2/n + s_c^2/n, the per-unit counts' own variance); statsmodels
    # Poisson GLM with log link and the sandwich covariance (HC0; statsmodels applies
    # no small-sample factor to GLMs) times n/(n-1), the divisor of the sample
    # variance, on the log ratio. Both computed from the raw counts.
    rng = np.random.default_rng(31)
    n = 600
    yc = rng.poisson(rng.gamma(2.0, 1.0, n)).astype(float)
    yt = rng.poisson(rng.gamma(2.0, 1.1, n)).astype(float)
    x = np.column_stack([np.ones(2 * n), np.r_[np.zeros(n), np.ones(n)]])
    d = effect("count", count_totals(yc), count_totals(yt))
    ols = sm.OLS(np.r_[yc, yt], x).fit(cov_type="HC1")
    assert d.estimate == pytest.approx(ols.params[1], rel=1e-12)
    assert d.se == pytest.approx(ols.bse[1], rel=1e-10)
    r = effect("count", count_totals(yc), count_totals(yt), scale="relative")
    glm = sm.GLM(np.r_[yc, yt], x, family=sm.families.Poisson()).fit(cov_type="HC0")
    assert r.log_ratio_estimate == pytest.approx(glm.params[1], rel=1e-9)
    assert r.log_ratio_se == pytest.approx(glm.bse[1] * math.sqrt(n / (n - 1)), rel=1e-9)
    # the raw counts' sample variance (plain computation)
    assert d.se ** 2 == pytest.approx(yc.var(ddof=1) / n + yt.var(ddof=1) / n, rel=1e-10)


def test_dispersion_check_flags_overdispersed_counts_only():
    # Fisher's index of dispersion: (n - 1) D ~ chi-square(n - 1) for Poisson counts
    # (Cochran 1954); p-values against scipy.stats.chi2.sf. Seeded data: Poisson counts
    # (D near 1) are not flagged; negative binomial counts with variance 2 + 4/2 = 4,
    # twice the mean (D near 2), are.
    rng = np.random.default_rng(32)
    n = 2_000

    def looks(y_c: np.ndarray, y_t: np.ndarray) -> list[dict]:
        return [{arm: {"exposure": float(y.size), "events": float(y.sum()),
                       "events_sq": float((y * y).sum())}
                 for arm, y in (("control", y_c[:m]), ("treatment", y_t[:m]))}
                for m in (n // 2, n)]

    pois = validate_looks("rate", looks(rng.poisson(2.0, n), rng.poisson(2.0, n)))
    chk = dispersion_check(pois)
    assert chk is not None and not chk.flagged.any()
    y = rng.poisson(2.0, n).astype(float)
    d = y.var(ddof=1) / y.mean()
    ref = stats.chi2.sf((n - 1) * d, n - 1)
    one = validate_looks("rate", [{a: {"exposure": float(n), "events": y.sum(),
                                       "events_sq": (y * y).sum()}
                                   for a in ("control", "treatment")}])
    chk1 = dispersion_check(one)
    assert chk1 is not None
    assert chk1.index_control[0] == pytest.approx(d, rel=1e-12)
    assert chk1.p_control[0] == pytest.approx(ref, rel=1e-9)
    nb = validate_looks("rate", looks(rng.poisson(rng.gamma(2.0, 1.0, n)),
                                      rng.poisson(rng.gamma(2.0, 1.0, n))))
    chk2 = dispersion_check(nb)
    assert chk2 is not None and chk2.flagged.all()
    assert (chk2.index_control > DISPERSION_LIMIT).all()


def test_rate_analysis_warns_when_counts_vary_more_than_poisson():
    rng = np.random.default_rng(33)
    plan = seqtest.design(alpha=0.05, sides=2, power=0.8, looks=2,
                          metric={"kind": "rate", "baseline": 2.0, "mde": 0.2})
    n = 1_500

    def looks(draw) -> list[dict]:
        yc, yt = draw(n), draw(n)
        return [{arm: {"exposure": float(m), "events": float(y[:m].sum()),
                       "events_sq": float((y[:m] ** 2).sum())}
                 for arm, y in (("control", yc), ("treatment", yt))} for m in (700, 1_500)]

    over = seqtest.analyze(plan, looks(lambda m: rng.poisson(rng.gamma(2.0, 1.0, m))))
    assert any("vary more than Poisson" in w and "count metric" in w for w in over.warnings)
    fine = seqtest.analyze(plan, looks(lambda m: rng.poisson(2.0, m)))
    assert not any("Poisson" in w for w in fine.warnings)
    # without events_sq nothing can be said
    bare = [{a: {k: v for k, v in t.items() if k != "events_sq"} for a, t in lk.items()}
            for lk in looks(lambda m: rng.poisson(rng.gamma(2.0, 1.0, m)))]
    assert not any("Poisson" in w for w in seqtest.analyze(plan, bare).warnings)


# ---------------------------------------------------------------------------
# Bad input: the metric, the arm and the field named; nothing half-done
# ---------------------------------------------------------------------------


def _ok(kind: str) -> dict:
    rng = np.random.default_rng(41)
    if kind == "ratio":
        return ratio_totals(*ratio_units(rng, 100, 0.5))
    if kind == "adjusted":
        return adjusted_totals(*adjusted_units(rng, 100, 3.0, 1.0, 0.5))
    return count_totals(rng.poisson(2.0, 100).astype(float))


@pytest.mark.parametrize("kind, arm, change, field, words", [
    ("ratio", "treatment", {"denominator": 0.0, "denominator_sq": 0.0, "cross": 0.0},
     "denominator", "denominator is 0"),
    ("ratio", "control", {"numerator_sq": 1.0}, "numerator_sq", "variance negative"),
    ("ratio", "control", {"denominator_sq": -4.0}, "denominator_sq", "negative"),
    ("ratio", "treatment", {"cross": 1e9}, "cross", "correlation above 1"),
    ("ratio", "control", {"denominator": -3.0}, "denominator", "negative"),
    ("adjusted", "control", {"covariate_sq": 0.0}, "covariate_sq", "variance negative"),
    ("adjusted", "treatment", {"cross": -1e7}, "cross", "impossible together"),
    ("adjusted", "control", {"n": 1}, "n", "at least 2 units"),
    ("count", "treatment", {"events_sq": 10.0}, "events_sq", "below events"),
    ("count", "control", {"events": 2.5}, "events", "not a whole number"),
])
def test_impossible_totals_are_refused_naming_look_arm_and_field(kind, arm, change, field,
                                                                 words):
    good = _ok(kind)
    bad = {**good, **change}
    look = {"control": good, "treatment": good}
    look[arm] = bad
    with pytest.raises(LookDataError, match=words) as info:
        validate_looks(kind, [{"control": good, "treatment": good}, look])
    assert (info.value.look, info.value.arm, info.value.field) == (2, arm, field)
    plan = seqtest.design(alpha=0.05, sides=2, looks=2)
    with pytest.raises(LookDataError, match=f"look 2, arm {arm}, field {field}"):
        seqtest.analyze(plan, [{"control": good, "treatment": good}, look], metric=kind,
                        max_n=1_000)


def test_covariate_posted_for_one_arm_only_is_refused():
    good = _ok("adjusted")
    plain = {k: good[k] for k in ("n", "sum", "sum_sq")}
    # an adjusted metric without the covariate in one arm: the missing fields are named
    with pytest.raises(LookDataError, match="look 1, arm treatment, field covariate: "
                                            "missing fields covariate, covariate_sq, cross"):
        validate_looks("adjusted", [{"control": good, "treatment": plain}])
    # a continuous metric with a covariate in one arm: which kind it belongs to is said
    with pytest.raises(LookDataError, match="arm control, field covariate: unknown fields "
                                            r".*\(covariate, covariate_sq, cross are "
                                            r"totals of an adjusted metric\)"):
        validate_looks("continuous", [{"control": good, "treatment": plain}])
    # squared counts posted for one arm of a rate metric only, or at one look only
    r = {"exposure": 100.0, "events": 200.0}
    with pytest.raises(LookDataError, match="arm treatment, field events_sq: lacks "
                                            "events_sq where control at look 1 does"):
        validate_looks("rate", [{"control": {**r, "events_sq": 600.0}, "treatment": r}])
    with pytest.raises(LookDataError, match="look 2, arm control, field events_sq: has"):
        validate_looks("rate", [{"control": r, "treatment": r},
                                {"control": {**r, "events_sq": 600.0}, "treatment": r}])


def test_totals_of_the_new_kinds_must_not_go_backwards():
    good = _ok("ratio")
    less = {**good, "denominator": good["denominator"] - 5.0,
            "denominator_sq": good["denominator_sq"] - 25.0}
    with pytest.raises(LookDataError, match="look 2, arm control, field denominator: .* "
                                            "must not go backwards"):
        validate_looks("ratio", [{"control": good, "treatment": good},
                                 {"control": less, "treatment": good}])


# ---------------------------------------------------------------------------
# Look files
# ---------------------------------------------------------------------------


def _raw_totals(kind: str, rng: np.random.Generator, n: int) -> list[dict]:
    """Totals of the first 60 and all ``n`` units of seeded raw data."""
    if kind == "ratio":
        x, d = ratio_units(rng, n, 0.5)
        return [ratio_totals(x[:m], d[:m]) for m in (60, n)]
    if kind == "adjusted":
        y, x = adjusted_units(rng, n, 3.0, 1.0, 0.5)
        return [adjusted_totals(y[:m], x[:m]) for m in (60, n)]
    y = rng.poisson(2.0, n).astype(float)
    return [count_totals(y[:m]) for m in (60, n)]


@pytest.mark.parametrize("kind", ["ratio", "adjusted", "count"])
def test_wide_and_long_layouts_take_the_new_totals(tmp_path, kind):
    rng = np.random.default_rng(51)
    c, t = _raw_totals(kind, rng, 120), _raw_totals(kind, rng, 130)
    looks = [{"control": {f: float(v) for f, v in c[j].items()},
              "treatment": {f: float(v) for f, v in t[j].items()}} for j in range(2)]
    fields = METRIC_FIELDS[kind]
    wide = ",".join(f"{a}_{f}" for a in ("control", "treatment") for f in fields)
    rows = [",".join(repr(lk[a][f]) for a in ("control", "treatment") for f in fields)
            for lk in looks]
    p = tmp_path / "wide.csv"
    p.write_text(wide + "\n" + "\n".join(rows) + "\n")
    got = read_looks_csv(p, kind)
    assert [{a: {f: float(v) for f, v in tt.items()} for a, tt in g.items()}
            for g in got] == looks
    long = "look,arm," + ",".join(fields)
    lines = [f"{j + 1},{a}," + ",".join(repr(lk[a][f]) for f in fields)
             for j, lk in enumerate(looks) for a in ("treatment", "control")]
    q = tmp_path / "long.csv"
    q.write_text(long + "\n" + "\n".join(lines) + "\n")
    got = read_looks_csv(q, kind)
    assert [{a: {f: float(v) for f, v in tt.items()} for a, tt in g.items()}
            for g in got] == looks


def test_rate_file_with_squared_counts(tmp_path):
    p = tmp_path / "rate.csv"
    p.write_text("control_exposure,control_events,control_events_sq,treatment_exposure,"
                 "treatment_events,treatment_events_sq\n1000,2000,8000,1000,2100,8600\n")
    looks = read_looks_csv(p, "rate")
    assert looks[0]["treatment"]["events_sq"] == 8600
    p.write_text("control_exposure,control_events,control_events_sq,treatment_exposure,"
                 "treatment_events\n1000,2000,8000,1000,2100\n")
    with pytest.raises(LookDataError, match="events_sq"):
        read_looks_csv(p, "rate")
