"""Score statistics restricted to the null (seqtest.core.score) against outside references.

References used (named beside each check):

- statsmodels 0.14/0.15 ``test_proportions_2indep(method="score")``: the
  Farrington-Manning statistic (``correction=False``) and the Miettinen-Nurminen one
  (``correction=True``). For ``compare="diff"`` with a non-zero margin its restricted
  estimate uses a wrong coefficient in the cubic (``count0`` for ``nobs0``; open
  statsmodels issue #10269, confirmed here by the restricted likelihood), so there
  the reference is an independent restricted maximum likelihood (scipy's brentq on
  the profile score equation); at a zero margin it takes the pooled shortcut, which
  is right, and is used.
- statsmodels ``confint_proportions_2indep(method="score", compare="ratio")``:
  Koopman/Nam's closed form of the inverted ratio score test (both corrections).
- statsmodels ``test_poisson_2indep(method="score")`` for ``compare="diff"`` (the
  restricted-estimate score test) and ``compare="ratio"`` (the conditional score
  test, ``(y1 - y2 r_d) / sqrt((y1 + y2) r_d)``): the same statistics as ours.
  ``confint_poisson_2indep(method="score")`` inverts them with Nelder-Mead on the
  squared p-value error (``xtol=1e-8``), so its limits are checked through the
  p-value at our limits instead (that is exact) plus a loose comparison.
- scipy ``chi2_contingency(correction=False)``: Pearson's chi-square equals the
  square of the pooled z at no effect.
- statsmodels ``power_proportions_2indep`` / ``samplesize_proportions_2indep_onetail``
  (null variance pooled, alternative unpooled) and ``power_poisson_diff_2indep
  (method_var="score")`` for the sizing variances.
- Newcombe (1998), Statistics in Medicine 17, 873-890, Table II (from memory, and
  confirmed by the independent restricted-likelihood computation here): the
  score intervals without (Mee) and with (Miettinen-Nurminen) the N/(N-1) factor.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from scipy import optimize, special, stats  # type: ignore[import-untyped]

from seqtest.core import score

Z975 = float(special.ndtri(0.975))


# ---------------------------------------------------------------------------
# Independent reference: restricted maximum likelihood by root finding (scipy)
# ---------------------------------------------------------------------------


def _profile_root(deriv, lo, hi):
    """Maximiser of a concave profile log-likelihood on [lo, hi] from its
    derivative (decreasing): brentq at xtol 1e-16, or an end."""
    eps = 1e-15 * (hi - lo)
    d_lo, d_hi = deriv(lo + eps), deriv(hi - eps)
    if d_lo <= 0:
        return lo
    if d_hi >= 0:
        return hi
    return optimize.brentq(deriv, lo + eps, hi - eps, xtol=1e-16, rtol=4 * np.finfo(float).eps)


def _term(count, denom):
    if count == 0:
        return 0.0
    return math.inf if denom == 0 else count / denom


def ref_binary(xc, nc, xt, nt, null, scale, correction=False):
    """(z, p_c~, p_t~) from the restricted likelihood, no closed forms."""
    if scale == "difference":
        d = null
        lo, hi = max(0.0, -d), min(1.0, 1.0 - d)

        def deriv(pc):
            pt = pc + d
            return (_term(xt, pt) - _term(nt - xt, 1 - pt) + _term(xc, pc)
                    - _term(nc - xc, 1 - pc))
        pc = _profile_root(deriv, lo, hi)
        pt = pc + d
        s, w = xt / nt - xc / nc - d, 1.0
    else:
        phi = 1.0 + null
        lo, hi = 0.0, min(1.0, 1.0 / phi)

        def deriv(pc):
            pt = phi * pc
            return (phi * (_term(xt, pt) - _term(nt - xt, 1 - pt)) + _term(xc, pc)
                    - _term(nc - xc, 1 - pc))
        pc = _profile_root(deriv, lo, hi)
        pt = phi * pc
        s, w = xt / nt - phi * xc / nc, phi
    v = pt * (1 - pt) / nt + w * w * pc * (1 - pc) / nc
    if correction:
        v *= (nc + nt) / (nc + nt - 1)
    return s / math.sqrt(v), pc, pt


def ref_rate_difference(xc, ec, xt, et, d):
    lo = max(0.0, -d)

    def deriv(lc):
        return _term(xc, lc) - ec + _term(xt, lc + d) - et
    hi = lo + 10 * (xc + xt + 1) / (ec + et) + 10 * abs(d)
    lc = _profile_root(deriv, lo, hi)
    lt = lc + d
    return (xt / et - xc / ec - d) / math.sqrt(lt / et + lc / ec), lc, lt


def ref_interval(zfun, est, c, lo_end, hi_end):
    """Limits of {theta: -c < z(theta) < c} by brentq at xtol 1e-15, from a scan."""
    def root(target, a, b):
        fa, fb = zfun(a) - target, zfun(b) - target
        if fa * fb > 0:
            return None
        return optimize.brentq(lambda t: zfun(t) - target, a, b, xtol=1e-15)

    grid_lo = np.linspace(lo_end, est, 400)
    grid_hi = np.linspace(est, hi_end, 400)
    lower = upper = None
    zl = [zfun(t) for t in grid_lo]
    for i in range(len(grid_lo) - 1, 0, -1):
        if zl[i - 1] >= c > zl[i]:
            lower = root(c, grid_lo[i - 1], grid_lo[i])
            break
    zh = [zfun(t) for t in grid_hi]
    for i in range(len(grid_hi) - 1):
        if zh[i] > -c >= zh[i + 1]:
            upper = root(-c, grid_hi[i], grid_hi[i + 1])
            break
    return lower, upper


def _tables(rng, n, lo=1, hi=400):
    nc = rng.integers(lo, hi, n)
    nt = rng.integers(lo, hi, n)
    xc = rng.integers(0, nc + 1)
    xt = rng.integers(0, nt + 1)
    return xc, nc, xt, nt


# ---------------------------------------------------------------------------
# The statistics
# ---------------------------------------------------------------------------


@pytest.mark.filterwarnings("ignore::RuntimeWarning")
@pytest.mark.parametrize("correction", [False, True])
def test_binary_difference_at_no_effect_matches_statsmodels_score(correction):
    # statsmodels test_proportions_2indep(method="score", compare="diff"), value 0
    from statsmodels.stats.proportion import test_proportions_2indep  # type: ignore[import-untyped]
    rng = np.random.default_rng(1)
    xc, nc, xt, nt = _tables(rng, 200)
    keep = (xc + xt > 0) & (xc + xt < nc + nt)
    ours = score.binary_difference(xc, nc, xt, nt, 0.0, correction=correction).z
    for i in np.flatnonzero(keep):
        ref = test_proportions_2indep(xt[i], nt[i], xc[i], nc[i], value=0, method="score",
                                      compare="diff", correction=correction).statistic
        assert ours[i] == pytest.approx(ref, rel=1e-12, abs=1e-12)


@pytest.mark.parametrize("correction", [False, True])
def test_binary_difference_margin_matches_restricted_likelihood(correction):
    # independent restricted MLE (scipy brentq on the profile score); the closed-form
    # cubic of Farrington-Manning must reach the same maximiser
    rng = np.random.default_rng(2)
    xc, nc, xt, nt = _tables(rng, 150)
    d = rng.uniform(-0.9, 0.9, 150)
    res = score.binary_difference(xc, nc, xt, nt, d, correction=correction)
    for i in range(150):
        z, pc, pt = ref_binary(xc[i], nc[i], xt[i], nt[i], d[i], "difference", correction)
        assert res.control_null[i] == pytest.approx(pc, abs=1e-11)
        assert res.treatment_null[i] == pytest.approx(pt, abs=1e-11)
        assert res.z[i] == pytest.approx(z, rel=1e-8, abs=1e-9)


def test_statsmodels_difference_margin_is_not_the_restricted_maximum():
    # Why statsmodels is not the reference for non-zero margins (issue #10269): its
    # "null" proportions do not maximise the restricted likelihood; ours do.
    from statsmodels.stats.proportion import test_proportions_2indep  # type: ignore[import-untyped]
    xc, nc, xt, nt, d = 20, 100, 30, 100, 0.05
    sm = test_proportions_2indep(xt, nt, xc, nc, value=d, method="score", compare="diff",
                                 correction=False)
    _, pc, pt = ref_binary(xc, nc, xt, nt, d, "difference")
    ours = score.binary_difference(xc, nc, xt, nt, d)
    assert ours.treatment_null == pytest.approx(pt, abs=1e-12)
    assert abs(sm.prop1_null - pt) > 1e-3

    def loglik(p_t):
        p_c = p_t - d
        return (xt * math.log(p_t) + (nt - xt) * math.log1p(-p_t) + xc * math.log(p_c)
                + (nc - xc) * math.log1p(-p_c))
    assert loglik(ours.treatment_null) > loglik(sm.prop1_null)


@pytest.mark.filterwarnings("ignore::RuntimeWarning")
@pytest.mark.parametrize("correction", [False, True])
def test_binary_relative_matches_statsmodels_score(correction):
    # statsmodels test_proportions_2indep(method="score", compare="ratio")
    from statsmodels.stats.proportion import test_proportions_2indep  # type: ignore[import-untyped]
    rng = np.random.default_rng(3)
    xc, nc, xt, nt = _tables(rng, 200)
    r0 = np.where(rng.random(200) < 0.3, 0.0, np.expm1(rng.uniform(-1.5, 1.5, 200)))
    res = score.binary_relative(xc, nc, xt, nt, r0, correction=correction)
    checked = 0
    for i in range(200):
        if xc[i] + xt[i] in (0, nc[i] + nt[i]):
            continue
        ref = test_proportions_2indep(xt[i], nt[i], xc[i], nc[i], value=1 + r0[i],
                                      method="score", compare="ratio",
                                      correction=correction).statistic
        assert res.z[i] == pytest.approx(ref, rel=1e-9, abs=1e-10)
        z, pc, _ = ref_binary(xc[i], nc[i], xt[i], nt[i], r0[i], "relative", correction)
        assert res.z[i] == pytest.approx(z, rel=1e-8, abs=1e-9)
        checked += 1
    assert checked > 150


def test_pooled_at_no_effect_is_pearson_chi_square_on_both_scales():
    # scipy.stats.chi2_contingency(correction=False): chi-square = z^2 of the pooled test
    rng = np.random.default_rng(4)
    xc, nc, xt, nt = _tables(rng, 60, lo=5)
    zd = score.binary_difference(xc, nc, xt, nt).z
    zr = score.binary_relative(xc, nc, xt, nt).z
    np.testing.assert_allclose(zd, zr, rtol=1e-13, atol=1e-13)
    for i in range(60):
        if xc[i] + xt[i] in (0, nc[i] + nt[i]):
            continue
        table = [[xc[i], nc[i] - xc[i]], [xt[i], nt[i] - xt[i]]]
        chi2 = stats.chi2_contingency(table, correction=False)[0]
        assert zd[i] ** 2 == pytest.approx(chi2, rel=1e-11, abs=1e-12)


@pytest.mark.filterwarnings("ignore::RuntimeWarning")
def test_rate_difference_matches_statsmodels_score():
    # statsmodels test_poisson_2indep(method="score", compare="diff"), any margin,
    # and the independent restricted likelihood
    from statsmodels.stats.rates import test_poisson_2indep  # type: ignore[import-untyped]
    rng = np.random.default_rng(5)
    xc, xt = rng.integers(0, 300, 120), rng.integers(0, 300, 120)
    ec, et = rng.uniform(5, 500, 120), rng.uniform(5, 500, 120)
    d = np.where(rng.random(120) < 0.3, 0.0, rng.uniform(-0.5, 0.5, 120))
    res = score.rate_difference(xc, ec, xt, et, d)
    for i in range(120):
        if xc[i] + xt[i] == 0 and d[i] == 0:
            continue
        ref = test_poisson_2indep(xt[i], et[i], xc[i], ec[i], value=d[i], method="score",
                                  compare="diff").statistic
        assert res.z[i] == pytest.approx(ref, rel=1e-10, abs=1e-10)
        z, lc, _ = ref_rate_difference(xc[i], ec[i], xt[i], et[i], d[i])
        assert res.control_null[i] == pytest.approx(lc, rel=1e-10, abs=1e-13)
        assert res.z[i] == pytest.approx(z, rel=1e-9, abs=1e-10)


def test_rate_relative_matches_statsmodels_and_the_conditional_binomial_score():
    # statsmodels test_poisson_2indep(method="score", compare="ratio"); and the score
    # statistic of the binomial of x_t given the total (pi0 = phi E_t / (phi E_t + E_c))
    from statsmodels.stats.rates import test_poisson_2indep  # type: ignore[import-untyped]
    rng = np.random.default_rng(6)
    xc, xt = rng.integers(0, 300, 120), rng.integers(0, 300, 120)
    ec, et = rng.uniform(5, 500, 120), rng.uniform(5, 500, 120)
    r0 = np.where(rng.random(120) < 0.3, 0.0, np.expm1(rng.uniform(-1, 1, 120)))
    res = score.rate_relative(xc, ec, xt, et, r0)
    for i in range(120):
        x = xc[i] + xt[i]
        if x == 0:
            assert res.degenerate[i] and res.z[i] == 0
            continue
        ref = test_poisson_2indep(xt[i], et[i], xc[i], ec[i], value=1 + r0[i],
                                  method="score", compare="ratio").statistic
        assert res.z[i] == pytest.approx(ref, rel=1e-10, abs=1e-10)
        phi = 1 + r0[i]
        pi0 = phi * et[i] / (phi * et[i] + ec[i])
        cond = (xt[i] - x * pi0) / math.sqrt(x * pi0 * (1 - pi0))
        assert res.z[i] == pytest.approx(cond, rel=1e-10, abs=1e-10)


def test_estimate_over_se_is_z_on_both_scales():
    # the property the issue asks for: (estimate - null) / se = z exactly
    rng = np.random.default_rng(7)
    xc, nc, xt, nt = _tables(rng, 300, lo=2)
    xc, xt = np.maximum(xc, 1), np.maximum(xt, 1)
    for fn, null in ((score.binary_difference, rng.uniform(-0.5, 0.5, 300)),
                     (score.binary_relative, np.expm1(rng.uniform(-1, 1, 300))),
                     (score.rate_difference, rng.uniform(-0.5, 0.5, 300)),
                     (score.rate_relative, np.expm1(rng.uniform(-1, 1, 300)))):
        res = fn(xc, nc, xt, nt, null)
        ok = ~np.asarray(res.degenerate)
        np.testing.assert_allclose(((res.estimate - res.null) / res.se)[ok], res.z[ok],
                                   rtol=1e-12, atol=1e-12)
        np.testing.assert_allclose(res.information[ok], 1 / res.variance[ok], rtol=1e-15)
    rel = score.binary_relative(xc, nc, xt, nt, 0.1)
    log_est, log_se = score.log_ratio(rel)
    np.testing.assert_allclose((log_est - math.log(1.1)) / log_se, rel.z, rtol=1e-9,
                               atol=1e-12)


def test_swapping_arms_flips_the_sign():
    # common practice: the comparison of treatment with control is minus the reverse
    rng = np.random.default_rng(8)
    xc, nc, xt, nt = _tables(rng, 200)
    d = rng.uniform(-0.8, 0.8, 200)
    a = score.binary_difference(xc, nc, xt, nt, d)
    b = score.binary_difference(xt, nt, xc, nc, -d)
    np.testing.assert_allclose(a.z, -b.z, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(a.skewness, -b.skewness, rtol=1e-8, atol=1e-12)
    np.testing.assert_allclose(a.corrected_z, -b.corrected_z, rtol=1e-8, atol=1e-12)
    phi = np.exp(rng.uniform(-1, 1, 200))
    a = score.binary_relative(xc, nc, xt, nt, phi - 1)
    b = score.binary_relative(xt, nt, xc, nc, 1 / phi - 1)
    np.testing.assert_allclose(a.z, -b.z, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(a.corrected_z, -b.corrected_z, rtol=1e-8, atol=1e-12)
    e_c, e_t = rng.uniform(1, 50, 200), rng.uniform(1, 50, 200)
    a = score.rate_difference(xc, e_c, xt, e_t, d)
    b = score.rate_difference(xt, e_t, xc, e_c, -d)
    np.testing.assert_allclose(a.z, -b.z, rtol=1e-10, atol=1e-12)
    a = score.rate_relative(xc, e_c, xt, e_t, phi - 1)
    b = score.rate_relative(xt, e_t, xc, e_c, 1 / phi - 1)
    np.testing.assert_allclose(a.z, -b.z, rtol=1e-10, atol=1e-12)


def test_extreme_p_values_through_the_survival_function():
    # statsmodels computes p-values with norm.sf: p near 1e-50 keeps its digits
    from statsmodels.stats.proportion import test_proportions_2indep  # type: ignore[import-untyped]
    for xc, nc, xt, nt, low, high in ((20_000, 10**9, 23_100, 10**9, 1e-55, 1e-45),
                                      (2000, 100_000, 4950, 100_000, 1e-300, 1e-250)):
        res = score.binary_difference(xc, nc, xt, nt)
        ref = test_proportions_2indep(xt, nt, xc, nc, method="score", compare="diff",
                                      correction=False, alternative="larger")
        p = res.p_value(sides=1, corrected=False)
        assert low < p < high
        assert p == pytest.approx(ref.pvalue, rel=1e-9)
        assert p == pytest.approx(float(stats.norm.sf(res.z)), rel=1e-12)
        assert res.p_value(sides=2, corrected=False) == pytest.approx(2 * p, rel=1e-12)
        # the corrected statistic's p-value is tiny too (not 0, not 1 - cdf's 0)
        assert 0 < res.p_value(sides=1) < 1e-30


def test_corrected_statistic_is_the_cornish_fisher_shift_of_the_boundary():
    # Cornish-Fisher (Bartlett 1953; Gart and Nam 1988, 1990): the corrected
    # statistic crosses +-c exactly when z crosses +-c + g (c^2 - 1), g = gamma / 6,
    # for c < 3 / |gamma|; and it is increasing in z everywhere
    rng = np.random.default_rng(13)
    z = rng.normal(0, 3, 20000)
    gamma = rng.uniform(-0.5, 0.5, 20000)
    c = rng.uniform(1.0, 5.0, 20000)
    ok = c < 3 / np.abs(gamma)
    zc = score.corrected_z(z, gamma)
    up, down = score.skew_bounds(c, gamma)
    # (disagreement allowed only at a tie, within rounding of the boundary)
    mismatch_up = ((zc >= c) != (z >= up)) & ok
    mismatch_down = ((zc <= -c) != (z <= down)) & ok
    assert not (mismatch_up & ~np.isclose(z, up, rtol=1e-12, atol=1e-12)).any()
    assert not (mismatch_down & ~np.isclose(z, down, rtol=1e-12, atol=1e-12)).any()
    assert ((zc >= c) & ok).sum() > 1000 and ((zc <= -c) & ok).sum() > 1000
    # the inverse map: z = zc + g (zc^2 - 1) on the increasing branch
    back = zc + gamma / 6 * (zc * zc - 1)
    branch = 1 + gamma / 3 * zc > 0
    np.testing.assert_allclose(back[branch], z[branch], rtol=1e-12, atol=1e-12)
    for g in (-0.8, 0.3, 1.5):
        grid = np.linspace(-40, 40, 20001)
        assert np.all(np.diff(score.corrected_z(grid, g)) > 0)
    # no skewness: no change
    np.testing.assert_array_equal(score.corrected_z(z, 0.0), z)


def test_score_test_takes_the_totals_as_monitoring_has_them():
    res = score.score_test("binary", {"n": [100, 200], "successes": [3, 9]},
                           {"n": [400, 800], "successes": [20, 33]}, scale="relative")
    ref = score.binary_relative([3, 9], [100, 200], [20, 33], [400, 800])
    np.testing.assert_array_equal(res.z, ref.z)
    res = score.score_test("rate", {"exposure": 10.0, "events": 4},
                           {"exposure": 12.0, "events": 9}, null=0.1)
    assert res.z == score.rate_difference(4, 10.0, 9, 12.0, 0.1).z
    with pytest.raises(ValueError, match=r"control: got \{'n': 3\}; allowed is a mapping"):
        score.score_test("binary", {"n": 3}, {"n": 3, "successes": 1})


# ---------------------------------------------------------------------------
# Zero cells and extremes
# ---------------------------------------------------------------------------


def test_binary_zero_and_full_cells_are_finite_and_documented():
    n_c, n_t = 40, 25
    for xc in (0, 1, n_c - 1, n_c):
        for xt in (0, 1, n_t - 1, n_t):
            for d in (0.0, -0.3, 0.3):
                res = score.binary_difference(xc, n_c, xt, n_t, d)
                assert np.isfinite(res.z) and np.isfinite(res.corrected_z)
                pooled_edge = (xc + xt) in (0, n_c + n_t)
                assert bool(res.degenerate) == (d == 0 and pooled_edge)
                if res.degenerate:
                    assert res.z == 0 and res.corrected_z == 0 and res.se == math.inf
                lo, hi = score.interval("binary", xc, n_c, xt, n_t, Z975)
                assert -1 <= lo <= xt / n_t - xc / n_c <= hi <= 1
            rel = score.binary_relative(xc, n_c, xt, n_t)
            assert np.isfinite(rel.z)
            if xc == 0:
                # no control successes: the ratio is undefined (or infinite), the
                # test is not
                assert rel.se == math.inf
                assert (rel.estimate == math.inf) if xt > 0 else math.isnan(rel.estimate)
            lo, hi = score.interval("binary", xc, n_c, xt, n_t, Z975, scale="relative")
            assert -1 <= lo <= hi
            if xt == 0:
                assert lo == -1
            if xc == 0:
                assert hi == math.inf
            if xc == 0 and xt == 0:
                assert (lo, hi) == (-1.0, math.inf)


def test_rate_zero_events_interval_in_closed_form():
    # with no events at all the plain score z at a difference d is -sqrt(d E_t)
    # (d > 0) or sqrt(-d E_c) (d < 0), so the limits are -c^2 / E_c and c^2 / E_t
    for ec, et in ((10.0, 30.0), (1000.0, 1.0)):
        lo, hi = score.interval("rate", 0, ec, 0, et, Z975, skew=False)
        assert lo == pytest.approx(-Z975 ** 2 / ec, rel=1e-11)
        assert hi == pytest.approx(Z975 ** 2 / et, rel=1e-11)
    res = score.rate_difference(0, 10.0, 0, 30.0, 0.0)
    assert res.degenerate and res.z == 0
    res = score.rate_difference(0, 10.0, 0, 30.0, 0.2)
    assert res.z == pytest.approx(-math.sqrt(0.2 * 30.0), rel=1e-12)
    lo, hi = score.interval("rate", 0, 5.0, 0, 5.0, Z975, scale="relative")
    assert (lo, hi) == (-1.0, math.inf)


def test_huge_and_tiny_totals():
    # far beyond real experiments: still finite and consistent with the pooled test
    res = score.binary_difference(1e12, 1e15, 1.001e12, 1e15)
    p = 1.0005e-3
    pooled = (1.001e12 / 1e15 - 1e12 / 1e15) / math.sqrt(p * (1 - p) * 2e-15)
    assert res.z == pytest.approx(pooled, rel=1e-9)
    res = score.binary_difference(3, 1e9, 1, 1e9, 1e-9)
    assert np.isfinite(res.z)
    _, pc, pt = ref_binary(3, 1e9, 1, 1e9, 1e-9, "difference")
    assert res.treatment_null == pytest.approx(pt, rel=1e-9)


def test_inputs_are_checked_with_actionable_messages():
    with pytest.raises(ValueError, match=r"control successes: got 5.0; allowed is at most n"):
        score.binary_difference(5, 4, 1, 10)
    with pytest.raises(ValueError, match=r"treatment n: got 0.0; allowed is a number > 0"):
        score.binary_difference(0, 4, 0, 0)
    with pytest.raises(ValueError, match=r"null: got 1.0; allowed is a difference"):
        score.binary_difference(1, 4, 1, 4, 1.0)
    with pytest.raises(ValueError, match=r"null: got -1.0; allowed is a relative effect"):
        score.rate_relative(1, 4, 1, 4, -1.0)
    with pytest.raises(ValueError, match=r"control events: got nan"):
        score.rate_difference(float("nan"), 4, 1, 4)
    with pytest.raises(ValueError, match=r"critical: got -1.0; allowed is a number > 0"):
        score.interval("binary", 1, 4, 1, 4, -1.0)
    with pytest.raises(ValueError, match=r"kind: got 'continuous'"):
        score.score_test("continuous", {}, {})


# ---------------------------------------------------------------------------
# Intervals
# ---------------------------------------------------------------------------


@pytest.mark.parametrize(
    "t, c, mee, mn",
    [  # treatment a/m, control b/n; Newcombe (1998) Table II (from memory)
        ((56, 70), (48, 80), (0.0533, 0.3377), (0.0528, 0.3382)),
        ((9, 10), (3, 10), (0.1821, 0.8370), (0.1700, 0.8406)),
        ((6, 7), (2, 7), (0.0544, 0.8478), (0.0342, 0.8534)),
        ((5, 56), (0, 29), (-0.0313, 0.1926), (-0.0326, 0.1933)),
        ((0, 10), (0, 20), (-0.1611, 0.2775), (-0.1658, 0.2844)),
        ((0, 10), (0, 10), (-0.2775, 0.2775), (-0.2879, 0.2879)),
        ((10, 10), (0, 20), (0.7225, 1.0), (0.7156, 1.0)),
        ((10, 10), (0, 10), (0.6777, 1.0), (0.6636, 1.0)),
    ])
def test_difference_score_interval_published_examples(t, c, mee, mn):
    (a, m), (b, n) = t, c
    for corr, want in ((False, mee), (True, mn)):
        lo, hi = score.interval("binary", b, n, a, m, Z975, skew=False, correction=corr)
        assert (round(lo, 4), round(hi, 4)) == pytest.approx(want, abs=1e-12)
        # confirmed by the independent restricted likelihood + brentq

        def zfun(d, corr=corr):
            if not -1 < d < 1:
                return math.copysign(math.inf, (a / m - b / n) - d) if (a / m - b / n) != d \
                    else 0.0
            if d == 0 and (a + b) in (0, m + n):
                return 0.0
            return ref_binary(b, n, a, m, d, "difference", corr)[0]
        rlo, rhi = ref_interval(zfun, a / m - b / n, Z975, -1 + 1e-12, 1 - 1e-12)
        if rlo is not None:
            assert lo == pytest.approx(rlo, abs=1e-9)
        if rhi is not None:
            assert hi == pytest.approx(rhi, abs=1e-9)


@pytest.mark.parametrize("correction", [False, True])
def test_relative_interval_matches_statsmodels_koopman(correction):
    # statsmodels confint_proportions_2indep(method="score", compare="ratio"):
    # Koopman/Nam's closed-form cubic roots of the same inverted test
    from statsmodels.stats.proportion import confint_proportions_2indep  # type: ignore[import-untyped]
    rng = np.random.default_rng(9)
    xc, nc, xt, nt = _tables(rng, 60, lo=10)
    xc = np.clip(xc, 1, nc - 1)
    xt = np.clip(xt, 1, nt - 1)
    lo, hi = score.interval("binary", xc, nc, xt, nt, Z975, scale="relative", skew=False,
                            correction=correction)
    for i in range(60):
        rl, ru = confint_proportions_2indep(xt[i], nt[i], xc[i], nc[i], method="score",
                                            compare="ratio", correction=correction)
        assert 1 + lo[i] == pytest.approx(float(np.real(rl)), rel=1e-8)
        assert 1 + hi[i] == pytest.approx(float(np.real(ru)), rel=1e-8)


@pytest.mark.parametrize("scale", ["difference", "relative"])
def test_rate_interval_matches_statsmodels_score_inversion(scale):
    # statsmodels confint_poisson_2indep(method="score") finds its limits by
    # Nelder-Mead on (p - alpha)^2 with xtol 1e-8, good to about 1e-4 relative; the
    # exact check is statsmodels' own p-value at our limits, which must be alpha
    from statsmodels.stats.rates import confint_poisson_2indep, test_poisson_2indep  # type: ignore[import-untyped]
    compare = "diff" if scale == "difference" else "ratio"
    shift = 0.0 if scale == "difference" else 1.0
    for xc, ec, xt, et in ((30, 100.0, 45, 90.0), (3, 10.0, 11, 25.0), (250, 1000.0, 190, 1e3)):
        lo, hi = score.interval("rate", xc, ec, xt, et, Z975, scale=scale, skew=False)
        for lim in (lo, hi):
            p = test_poisson_2indep(xt, et, xc, ec, value=lim + shift, method="score",
                                    compare=compare).pvalue
            assert p == pytest.approx(0.05, abs=1e-10)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ref = confint_poisson_2indep(xt, et, xc, ec, method="score", compare=compare)
        assert lo + shift == pytest.approx(ref[0], rel=2e-4, abs=1e-6)
        assert hi + shift == pytest.approx(ref[1], rel=2e-4, abs=1e-6)


CASES = [("binary", "difference"), ("binary", "relative"), ("rate", "difference"),
         ("rate", "relative")]


@pytest.mark.parametrize("kind, scale", CASES)
@pytest.mark.parametrize("skew", [False, True])
def test_interval_solver_accuracy_against_brentq(kind, scale, skew):
    # the stated accuracy: within 1e-12 of max(Wald scale, |limit|) of the root of
    # the computed statistic (scipy brentq at xtol 1e-15 as the reference)
    from seqtest.core.score import _z_raw
    rng = np.random.default_rng(10)
    for _ in range(25):
        nc, nt = rng.integers(5, 3000, 2)
        xc, xt = rng.integers(1, nc), rng.integers(1, nt)
        c = float(rng.uniform(1.5, 5.0))
        ec, et = (float(nc), float(nt)) if kind == "binary" else rng.uniform(5, 3000, 2)
        lo, hi = score.interval(kind, xc, ec, xt, et, c, scale=scale, skew=skew)
        rel = scale == "relative"

        def zf(w, rel=rel, xc=xc, ec=ec, xt=xt, et=et):
            null = math.expm1(w) if rel else w
            return float(_z_raw(kind, scale, np.array(xc), np.array(ec), np.array(xt),
                                np.array(et), np.array(null), False, skew))
        est = (math.log((xt / et) / (xc / ec)) if rel else xt / et - xc / ec)
        w_lo, w_hi = (math.log1p(lo), math.log1p(hi)) if rel else (lo, hi)
        for w, target in ((w_lo, c), (w_hi, -c)):
            span = 1e-6 * max(1.0, abs(w))
            a, b = w - span, w + span
            assert zf(a) - target > 0 > zf(b) - target
            ref = optimize.brentq(lambda t, target=target: zf(t) - target, a, b, xtol=1e-15,
                                  rtol=4 * np.finfo(float).eps)
            if kind == "binary" and not rel:
                scale_w = math.sqrt(xt * (nt - xt) / nt ** 3 + xc * (nc - xc) / nc ** 3)
            elif rel:
                scale_w = math.sqrt(1 / xt + 1 / xc)
            else:
                scale_w = math.sqrt(xt / et ** 2 + xc / ec ** 2)
            assert abs(w - ref) <= 2e-12 * max(scale_w, abs(ref), abs(est))


@pytest.mark.parametrize("kind, scale", CASES)
@pytest.mark.parametrize("sides", [1, 2])
def test_interval_excludes_the_null_exactly_when_the_test_rejects(kind, scale, sides):
    # consistency with the test, also at nulls placed on the limits themselves
    rng = np.random.default_rng(11)
    n = 400
    nc, nt = rng.integers(20, 2000, n), rng.integers(20, 2000, n)
    xc, xt = rng.binomial(nc, 0.05), rng.binomial(nt, 0.06)
    c = rng.uniform(1.6, 4.5, n)
    ec, et = (nc, nt) if kind == "binary" else (nc * 1.3, nt * 0.7)
    for skew in (False, True):
        lo0, hi0 = score.interval(kind, xc, ec, xt, et, c, scale=scale, sides=sides, skew=skew)
        for null in (np.zeros(n), lo0, hi0 if sides == 2 else lo0,
                     rng.uniform(-0.02, 0.03, n)):
            null = np.where(np.isfinite(null), null, 0.0)
            if scale == "relative":
                null = np.maximum(null, -0.99)
            elif kind == "binary":
                null = np.clip(null, -0.99, 0.99)
            lo, hi = score.interval(kind, xc, ec, xt, et, c, scale=scale, sides=sides,
                                    skew=skew, null=null)
            if kind == "binary":
                ctrl, trt = {"n": ec, "successes": xc}, {"n": et, "successes": xt}
            else:
                ctrl, trt = {"exposure": ec, "events": xc}, {"exposure": et, "events": xt}
            res = score.score_test(kind, ctrl, trt, scale=scale, null=null)
            z = np.asarray(res.corrected_z if skew else res.z)
            reject = (z >= c) if sides == 1 else (np.abs(z) >= c)
            excluded = (null < lo) | (null > hi)
            np.testing.assert_array_equal(excluded, reject)


def test_repeated_intervals_vectorised_over_looks():
    # one call for (experiments, looks) with each look's own boundary equals the
    # look-by-look calls
    rng = np.random.default_rng(12)
    looks = np.array([0.2, 0.4, 0.6, 0.8, 1.0])
    bounds = np.array([4.877, 3.357, 2.680, 2.290, 2.031])
    n_c = np.round(looks * 3000).astype(int)
    n_t = np.round(looks * 12000).astype(int)
    inc_c = rng.binomial(np.diff(n_c, prepend=0), 0.02, size=(8, 5))
    inc_t = rng.binomial(np.diff(n_t, prepend=0), 0.025, size=(8, 5))
    xc, xt = inc_c.cumsum(1), inc_t.cumsum(1)
    for scale in ("difference", "relative"):
        lo, hi = score.interval("binary", xc, n_c, xt, n_t, bounds, scale=scale)
        assert lo.shape == hi.shape == (8, 5)
        for i in (0, 5):
            for k in range(5):
                one = score.interval("binary", xc[i, k], n_c[k], xt[i, k], n_t[k], bounds[k],
                                     scale=scale)
                assert (lo[i, k], hi[i, k]) == one
    # a look that spends nothing (boundary inf) has the whole range as its interval
    lo, hi = score.interval("binary", xc, n_c, xt, n_t, np.r_[np.inf, bounds[1:]])
    assert np.all(lo[:, 0] == -1) and np.all(hi[:, 0] == 1) and np.all(lo[:, 1:] > -1)
    lo, hi = score.interval("binary", xc, n_c, xt, n_t, np.inf, scale="relative", null=0.0)
    assert np.all(lo == -1) and np.all(hi == np.inf)


@pytest.mark.parametrize("kind, scale", CASES)
def test_the_statistic_decreases_in_the_null(kind, scale):
    # the inversion needs z(theta0) decreasing: every table with arms up to 12 (and,
    # for the corrected statistic, wherever |z| >= 1, the only region an interval
    # uses), on a fine grid of nulls
    from seqtest.core.score import _z_raw
    rows = [(a, m, b, n) for m in range(1, 13) for n in range(1, 13) for a in range(m + 1)
            for b in range(n + 1)]
    t = np.array(rows, float)
    xc, nc, xt, nt = (t[:, i][:, None] for i in range(4))
    if kind == "rate":
        nc, nt = nc * 0.37, nt * 1.9
    if scale == "relative":
        grid = np.expm1(np.linspace(-5, 5, 500))
    elif kind == "binary":
        grid = np.linspace(-0.998, 0.998, 500)
    else:
        grid = np.linspace(-4, 4, 500)
    for skew in (False, True):
        z = _z_raw(kind, scale, xc, nc, xt, nt, grid[None, :], False, skew)
        rise = np.diff(z, axis=1) > 1e-12
        if skew:
            rise &= np.abs(z[:, :-1]) >= 1.0
        assert not rise.any()


# ---------------------------------------------------------------------------
# Each tail at its level
# ---------------------------------------------------------------------------


def _exact_tails(n_c, n_t, p, c):
    """Exact upper and lower rejection probabilities of the plain score z, the
    corrected one and the unpooled Wald z, by enumerating both binomials."""
    xc = np.arange(0, int(n_c * p + 12 * math.sqrt(n_c * p)) + 10)
    xt = np.arange(0, int(n_t * p + 12 * math.sqrt(n_t * p)) + 10)
    w = np.outer(stats.binom.pmf(xc, n_c, p), stats.binom.pmf(xt, n_t, p))
    res = score.binary_difference(xc[:, None], n_c, xt[None, :], n_t)
    a, b = xc[:, None] / n_c, xt[None, :] / n_t
    with np.errstate(divide="ignore", invalid="ignore"):
        v = a * (1 - a) / n_c + b * (1 - b) / n_t
        wald = np.where(v > 0, (b - a) / np.sqrt(v), 0.0)
    out = {}
    for name, z in (("score", res.z), ("corrected", res.corrected_z), ("wald", wald)):
        out[name] = (float((w * (z >= c)).sum()), float((w * (z <= -c)).sum()))
    return out


def test_exact_per_tail_level_at_a_rare_baseline_with_unequal_arms():
    # 2% baseline, 8,000 control and 32,000 treatment users (and the reverse), one
    # tail at 0.025: exact enumeration, no Monte Carlo error
    for n_c, n_t in ((8000, 32000), (32000, 8000)):
        t = _exact_tails(n_c, n_t, 0.02, Z975)
        up, down = t["corrected"]
        assert abs(up - 0.025) < 2e-4 and abs(down - 0.025) < 2e-4
        # the contrast: the plain score z leaks the tail of the larger arm's side and
        # the unpooled Wald z the other one, each by far more than that
        small_side = 0 if n_c < n_t else 1      # Wald leaks upward when control is small
        assert t["wald"][small_side] > 0.029
        assert t["score"][1 - small_side] > 0.026
        assert t["score"][small_side] < 0.024


@pytest.mark.slow
def test_monte_carlo_upper_tail_with_1_to_4_allocation():
    # Seeded simulation of the fixed-sample test, one-sided 0.025, 2% baseline,
    # 8,000 vs 32,000 users both ways round, 1,000,000 experiments each.
    # Monte Carlo bound: the rejection count is binomial, so its standard error at
    # 0.025 is sqrt(0.025 * 0.975 / 1e6) = 1.56e-4; 4 standard errors (two-sided
    # 99.994%) give 6.2e-4. Both the corrected score statistic's rate and the exact
    # rate (enumeration) must lie within it of 0.025 and of each other.
    reps = 1_000_000
    se = math.sqrt(0.025 * 0.975 / reps)
    bound = 4 * se
    rng = np.random.default_rng(20250909)
    for n_c, n_t in ((8000, 32000), (32000, 8000)):
        xc = rng.binomial(n_c, 0.02, reps)
        xt = rng.binomial(n_t, 0.02, reps)
        res = score.binary_difference(xc, n_c, xt, n_t)
        up = float(np.mean(res.corrected_z >= Z975))
        exact = _exact_tails(n_c, n_t, 0.02, Z975)
        assert abs(up - 0.025) < bound, (n_c, n_t, up)
        assert abs(up - exact["corrected"][0]) < bound
        # contrast on the same draws: the plain pooled score and the unpooled Wald
        a, b = xc / n_c, xt / n_t
        wald = (b - a) / np.sqrt(a * (1 - a) / n_c + b * (1 - b) / n_t)
        up_score = float(np.mean(res.z >= Z975))
        up_wald = float(np.mean(wald >= Z975))
        if n_c < n_t:
            assert up_wald > 0.025 + bound and up_score < 0.025 - bound
        else:
            assert up_wald < 0.025 - bound and up_score > 0.025 + bound


# ---------------------------------------------------------------------------
# Sizing
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("p_c, p_t, q", [(0.02, 0.025, 4.0), (0.02, 0.025, 0.25),
                                         (0.1, 0.12, 1.0), (0.3, 0.2, 2.0)])
def test_design_variances_at_no_effect_match_statsmodels(p_c, p_t, q):
    # statsmodels power_proportions_2indep: null variance pooled, alternative
    # unpooled, per unit of sample 1 (here the control arm, nobs2 = ratio * nobs1)
    from statsmodels.stats.proportion import (  # type: ignore[import-untyped]
        power_proportions_2indep,
        samplesize_proportions_2indep_onetail,
    )
    dv = score.design_variances("binary", p_c, p_t, allocation=q)
    ref = power_proportions_2indep(p_c - p_t, p_t, 1000, ratio=q)
    assert dv.v0 == pytest.approx(ref.std_null ** 2, rel=1e-12)
    assert dv.v1 == pytest.approx(ref.std_alt ** 2, rel=1e-12)
    # the relative scale at no effect is the same test
    dr = score.design_variances("binary", p_c, p_t, allocation=q, scale="relative")
    assert (dr.delta, dr.v0, dr.v1) == pytest.approx((dv.delta, dv.v0, dv.v1), rel=1e-12)
    n_c, n_t = score.fixed_sample_size(dv, alpha=0.05, power=0.8, sides=2, allocation=q)
    want = samplesize_proportions_2indep_onetail(p_c - p_t, p_t, 0.8, ratio=q, alpha=0.05)
    assert n_c == pytest.approx(want, rel=1e-10)
    assert n_t == pytest.approx(q * n_c, rel=1e-15)


@pytest.mark.parametrize("d0", [0.0, 0.01, -0.02])
def test_rate_design_variances_match_statsmodels(d0):
    # statsmodels power_poisson_diff_2indep(method_var="score"): restricted null
    # variance at any margin, per unit exposure of sample 1 (our control arm)
    from statsmodels.stats.rates import power_poisson_diff_2indep  # type: ignore[import-untyped]
    l_c, l_t, q = 0.5, 0.58, 2.5
    dv = score.design_variances("rate", l_c, l_t, allocation=q, null=d0)
    ref = power_poisson_diff_2indep(l_c, l_t, 1000, nobs_ratio=q, value=-d0,
                                    method_var="score")
    assert dv.v0 == pytest.approx(ref.std_null ** 2, rel=1e-10)
    assert dv.v1 == pytest.approx(ref.std_alt ** 2, rel=1e-12)
    assert dv.delta == pytest.approx(l_t - l_c - d0, rel=1e-14)


@pytest.mark.parametrize("d0", [0.01, -0.015])
def test_binary_design_variances_with_a_margin_use_the_restricted_limit(d0):
    # Farrington-Manning sizing: the null rates are the restricted estimates from the
    # expected data, here checked against the restricted likelihood maximised directly
    p_c, p_t, q = 0.1, 0.12, 3.0
    dv = score.design_variances("binary", p_c, p_t, allocation=q, null=d0)
    _, pc, pt = ref_binary(p_c * 1.0, 1.0, p_t * q, q, d0, "difference")
    assert (dv.control_null, dv.treatment_null) == pytest.approx((pc, pt), abs=1e-11)
    assert dv.v0 == pytest.approx(pt * (1 - pt) / q + pc * (1 - pc), rel=1e-10)


def test_score_drift_reduces_to_the_plan_and_to_the_fixed_formula():
    import seqtest
    plan = seqtest.design(alpha=0.025, sides=1, power=0.9, looks=5,
                          efficacy=seqtest.spending.obrien_fleming())
    d = score.score_drift(plan.info_fractions, plan.efficacy_z, sides=1, power=0.9, ratio=1.0)
    assert d == pytest.approx(plan.drift, abs=1e-7)
    # one look: ratio * z_a + z_b exactly (Farrington and Manning 1990, eq. 7)
    za, zb = float(special.ndtri(0.975)), float(special.ndtri(0.9))
    d1 = score.score_drift([1.0], [za], sides=1, power=0.9, ratio=1.07)
    assert d1 == pytest.approx(1.07 * za + zb, abs=1e-9)
    dv = score.design_variances("binary", 0.02, 0.026, allocation=4.0)
    n_fixed = score.fixed_sample_size(dv, alpha=0.025, power=0.9, sides=1, allocation=4.0)
    n_gs = score.group_sequential_size(dv, [1.0], [za], sides=1, power=0.9, allocation=4.0,
                                       skew=False)
    assert n_gs == pytest.approx(n_fixed, rel=1e-9)
