"""Tests for seqtest.spending: the error spending functions.

Each check names its source beside it. The closed forms are those of the
publications named in seqtest/spending.py and REFERENCES.md; they are evaluated
here independently with scipy.stats.norm (survival and inverse survival
functions) and numpy, never through the module under test.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import interpolate, stats

from seqtest import spending
from seqtest.planning.design import design

T_GRID = np.linspace(0.0, 1.0, 201)
ALPHAS = [0.001, 0.025, 0.05, 0.1, 0.5]


# ---------------------------------------------------------------------------
# Closed forms, computed independently
# ---------------------------------------------------------------------------

def ref_obrien_fleming(t, a):
    # Lan & DeMets (1983), Biometrika 70:659-663: f(t) = 2 - 2 Phi(z_{1-a/2} / sqrt t),
    # written with the normal survival function: 2 * sf(isf(a/2) / sqrt t).
    t = np.asarray(t, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(t > 0, 2.0 * stats.norm.sf(stats.norm.isf(a / 2) / np.sqrt(t)), 0.0)


def ref_pocock(t, a):
    # Lan & DeMets (1983): f(t) = a ln(1 + (e - 1) t).
    return a * np.log(1.0 + (math.e - 1.0) * np.asarray(t, float))


def ref_hsd(t, a, gamma):
    # Hwang, Shih & DeCani (1990), Statistics in Medicine 9:1439-1445:
    # f(t) = a (1 - e^{-gamma t}) / (1 - e^{-gamma}); gamma = 0 is linear a t.
    t = np.asarray(t, float)
    if gamma == 0:
        return a * t
    return a * (1.0 - np.exp(-gamma * t)) / (1.0 - np.exp(-gamma))


def ref_power(t, a, rho):
    # Kim & DeMets (1987), Biometrika 74:149-154: f(t) = a t^rho.
    return a * np.asarray(t, float) ** rho


FAMILIES = [
    pytest.param(spending.obrien_fleming(), ref_obrien_fleming, id="obf-type-LanDeMets1983"),
    pytest.param(spending.pocock(), ref_pocock, id="pocock-type-LanDeMets1983"),
    pytest.param(spending.hwang_shih_decani(0.0), lambda t, a: ref_hsd(t, a, 0.0),
                 id="hsd-gamma0-linear-HwangShihDeCani1990"),
    pytest.param(spending.hwang_shih_decani(-4.0), lambda t, a: ref_hsd(t, a, -4.0),
                 id="hsd-gamma-4-HwangShihDeCani1990"),
    pytest.param(spending.hwang_shih_decani(1.0), lambda t, a: ref_hsd(t, a, 1.0),
                 id="hsd-gamma1-HwangShihDeCani1990"),
    pytest.param(spending.hwang_shih_decani(-25.0), lambda t, a: ref_hsd(t, a, -25.0),
                 id="hsd-gamma-25-HwangShihDeCani1990"),
    pytest.param(spending.power_family(1.0), lambda t, a: ref_power(t, a, 1.0),
                 id="power-rho1-KimDeMets1987"),
    pytest.param(spending.power_family(3.0), lambda t, a: ref_power(t, a, 3.0),
                 id="power-rho3-KimDeMets1987"),
    pytest.param(spending.power_family(0.5), lambda t, a: ref_power(t, a, 0.5),
                 id="power-rho0.5-KimDeMets1987"),
]


@pytest.mark.parametrize("f, ref", FAMILIES)
@pytest.mark.parametrize("alpha", ALPHAS)
def test_closed_form(f, ref, alpha):
    # Sources: the publications named in each parameter id (closed forms above).
    got = f(T_GRID, alpha)
    want = ref(T_GRID, alpha)
    np.testing.assert_allclose(got, want, rtol=1e-12, atol=1e-300)


@pytest.mark.parametrize("f, ref", FAMILIES)
@pytest.mark.parametrize("alpha", ALPHAS)
def test_ends_and_monotone(f, ref, alpha):
    # Definition of a spending function (Lan & DeMets 1983): f(0) = 0, f(1) = alpha,
    # non-decreasing in t.
    assert f(0.0, alpha) == 0.0
    assert f(1.0, alpha) == pytest.approx(alpha, rel=1e-15)
    vals = f(T_GRID, alpha)
    assert np.all(np.diff(vals) >= 0.0)
    assert np.all((vals >= 0.0) & (vals <= alpha))


@pytest.mark.parametrize("f, ref", FAMILIES)
def test_overrunning_information_spends_alpha(f, ref):
    # Lan & DeMets (1983): information beyond the maximum spends nothing more:
    # f(t) = alpha for t >= 1 (common practice for over-running trials).
    got = f(np.array([1.0, 1.0 + 1e-9, 1.2, 3.0, 100.0]), 0.025)
    np.testing.assert_array_equal(got, np.full(5, 0.025))


@pytest.mark.parametrize("f, ref", FAMILIES)
def test_scalar_in_scalar_out_vector_in_vector_out(f, ref):
    assert isinstance(f(0.3, 0.05), float)
    out = f([0.3, 0.6], 0.05)
    assert isinstance(out, np.ndarray) and out.shape == (2,)
    out2 = f(np.array([[0.2, 0.4], [0.6, 0.8]]), 0.05)
    assert out2.shape == (2, 2)


def test_hsd_gamma_to_zero_is_continuous_with_linear():
    # Hwang, Shih & DeCani (1990): the gamma -> 0 limit of the family is a t.
    for g in (1e-6, -1e-6, 1e-9):
        np.testing.assert_allclose(spending.hwang_shih_decani(g)(T_GRID, 0.05),
                                   0.05 * T_GRID, rtol=1e-5, atol=1e-12)


def test_power_family_rho1_equals_hsd_gamma0():
    # Both families contain linear spending a t (Kim & DeMets 1987; HSD 1990).
    np.testing.assert_allclose(spending.power_family(1.0)(T_GRID, 0.05),
                               spending.hwang_shih_decani(0.0)(T_GRID, 0.05), rtol=1e-14)


def test_pocock_type_spends_more_early_than_obf_type():
    # Lan & DeMets (1983): the Pocock-type function spends early, the
    # O'Brien-Fleming-type function very little early (common practice).
    t = np.linspace(0.01, 0.99, 99)
    assert np.all(spending.pocock()(t, 0.025) > spending.obrien_fleming()(t, 0.025))


def _final_and_inflation(f):
    plan = design(alpha=0.05, sides=2, power=0.9, looks=5, efficacy=f)
    return plan.efficacy_z[-1], plan.inflation


def test_hsd_gamma_minus4_behaves_like_obf_and_gamma1_like_pocock():
    # REFERENCES.md (common practice): HSD gamma = -4 behaves like O'Brien-Fleming,
    # gamma = 1 like Pocock. Checked on what a user sees: the final boundary and
    # the inflation factor of a K = 5, two-sided 0.05, power 0.9 plan are nearer
    # those of the named function than those of the other one.
    of = np.array(_final_and_inflation(spending.obrien_fleming()))
    pk = np.array(_final_and_inflation(spending.pocock()))
    m4 = np.array(_final_and_inflation(spending.hwang_shih_decani(-4)))
    p1 = np.array(_final_and_inflation(spending.hwang_shih_decani(1)))
    assert np.all(np.abs(m4 - of) < np.abs(m4 - pk))
    assert np.all(np.abs(p1 - pk) < np.abs(p1 - of))


# ---------------------------------------------------------------------------
# Extremes: small alpha and early fractions keep relative precision
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("alpha, t", [
    (0.001, 0.5), (0.001, 0.1), (0.001, 0.03), (0.001, 0.012), (0.001, 0.01),
    (1e-6, 0.5), (1e-6, 0.1), (1e-6, 0.03), (1e-6, 0.02),
])
def test_obf_type_tiny_values_in_log_space(alpha, t):
    # Reference: log f = log 2 + scipy.stats.norm.logsf(isf(alpha/2) / sqrt t),
    # computed in log space, so it cannot underflow. The engine's value must be
    # strictly positive (never a 1 - cdf that cancels to 0) and agree to 1e-10
    # relative in log space. The smallest case, (0.001, 0.01), is about 1e-237.
    z = stats.norm.isf(alpha / 2) / math.sqrt(t)
    log_ref = math.log(2.0) + stats.norm.logsf(z)
    assert log_ref > math.log(1e-300)  # the case is inside the double range
    got = spending.obrien_fleming()(t, alpha)
    assert got > 0.0
    assert math.log(got) == pytest.approx(log_ref, rel=1e-10)


def test_obf_type_alpha_0001_covers_double_range():
    # At alpha = 0.001 the O'Brien-Fleming-type function is positive wherever the
    # true value exceeds the smallest normal double (log-space reference above);
    # it is 0 only where the true value underflows (below about 1e-308).
    alpha = 0.001
    t = np.geomspace(1e-4, 1.0, 400)
    got = spending.obrien_fleming()(t, alpha)
    log_ref = math.log(2.0) + stats.norm.logsf(stats.norm.isf(alpha / 2) / np.sqrt(t))
    representable = log_ref > math.log(1e-300)
    assert np.all(got[representable] > 0)
    np.testing.assert_allclose(np.log(got[representable]), log_ref[representable], rtol=1e-10)
    assert np.all(got[log_ref < -330 * math.log(10.0)] == 0.0)


@pytest.mark.parametrize("f, ref", FAMILIES)
def test_alpha_one_and_tiny(f, ref):
    # f(t, a) at the ends of the allowed alpha range (0, 1].
    for a in (1.0, 1e-12):
        np.testing.assert_allclose(f(T_GRID, a), ref(T_GRID, a), rtol=1e-11, atol=1e-300)


# ---------------------------------------------------------------------------
# Table spending: monotone PCHIP interpolation (Fritsch & Carlson 1980)
# ---------------------------------------------------------------------------

def test_table_reproduces_points_and_matches_scipy_pchip():
    # Reference: scipy.interpolate.PchipInterpolator (Fritsch & Carlson 1980) through
    # (0, 0), the table and (1, 1), scaled by alpha.
    x = [0.2, 0.5, 0.7]
    y = [0.05, 0.3, 0.6]
    f = spending.from_table(x, y)
    alpha = 0.025
    np.testing.assert_allclose(f(np.array(x), alpha), alpha * np.array(y), rtol=1e-14)
    ref = interpolate.PchipInterpolator([0, *x, 1], [0, *y, 1])
    np.testing.assert_allclose(f(T_GRID, alpha), alpha * ref(T_GRID), rtol=1e-12, atol=1e-300)
    assert f(1.0, alpha) == alpha and f(0.0, alpha) == 0.0


def test_table_stays_monotone_where_a_cubic_spline_overshoots():
    # Fritsch & Carlson (1980): PCHIP keeps monotone data monotone and keeps flat
    # stretches flat. A natural cubic spline through the same points is not
    # monotone (checked here with scipy.interpolate.CubicSpline, so the test data
    # really would break a non-monotone method).
    x = [0.1, 0.2, 0.4, 0.45, 1.0]
    y = [0.0, 0.5, 0.5, 0.95, 1.0]
    spline = interpolate.CubicSpline([0, *x], [0, *y])
    assert np.any(np.diff(spline(T_GRID)) < 0)
    f = spending.from_table(x, y)
    vals = f(T_GRID, 1.0)
    assert np.all(np.diff(vals) >= 0)
    flat = (T_GRID >= 0.2) & (T_GRID <= 0.4)
    np.testing.assert_allclose(vals[flat], 0.5, rtol=1e-14)
    assert np.all(vals[T_GRID <= 0.1] == 0.0)


def test_table_ending_at_one():
    f = spending.from_table([0.25, 0.5, 1.0], [0.1, 0.4, 1.0])
    assert f(1.0, 0.05) == 0.05
    assert f(0.5, 0.05) == pytest.approx(0.02, rel=1e-14)
    assert f(2.0, 0.05) == 0.05


def test_table_spending_drives_a_design():
    # A table equal to OBF-type spending at the looks gives the OBF-type boundaries:
    # the interpolant is only ever evaluated at the table points.
    t = np.arange(1, 6) / 5
    share = spending.obrien_fleming()(t, 0.025) / 0.025
    via_table = design(looks=5, efficacy=spending.from_table(t, share))
    direct = design(looks=5, efficacy=spending.obrien_fleming())
    np.testing.assert_allclose(via_table.efficacy_z, direct.efficacy_z, rtol=1e-10)


@pytest.mark.parametrize("fractions, cumulative, argument", [
    ([0.5, 1.0], [0.5], "fractions, cumulative"),
    ([], [], "fractions, cumulative"),
    ([0.5, 0.4], [0.1, 0.2], "fractions"),
    ([0.5, 0.5], [0.1, 0.2], "fractions"),
    ([0.0, 0.5], [0.0, 0.2], "fractions"),
    ([0.5, 1.5], [0.2, 0.9], "fractions"),
    ([-0.1, 0.5], [0.0, 0.2], "fractions"),
    ([0.4, 0.5], [0.3, 0.2], "cumulative"),
    ([0.4, 0.5], [0.3, 1.2], "cumulative"),
    ([0.4, 0.5], [-0.1, 0.2], "cumulative"),
    ([0.5, 1.0], [0.2, 0.9], "cumulative"),
    ([0.5, float("nan")], [0.2, 0.9], "fractions, cumulative"),
    ([0.5, 0.9], [0.2, float("inf")], "fractions, cumulative"),
])
def test_table_validation(fractions, cumulative, argument):
    with pytest.raises(ValueError, match=f"^{argument}: "):
        spending.from_table(fractions, cumulative)


# ---------------------------------------------------------------------------
# Validation at the public boundary, names, documents
# ---------------------------------------------------------------------------

@pytest.mark.parametrize("call, argument", [
    (lambda: spending.pocock()(0.5, 0.0), "alpha"),
    (lambda: spending.pocock()(0.5, -0.1), "alpha"),
    (lambda: spending.pocock()(0.5, 1.5), "alpha"),
    (lambda: spending.pocock()(0.5, float("nan")), "alpha"),
    (lambda: spending.pocock()(-0.5, 0.05), "t"),
    (lambda: spending.pocock()(float("nan"), 0.05), "t"),
    (lambda: spending.pocock()([0.2, float("inf")], 0.05), "t"),
    (lambda: spending.hwang_shih_decani(50), "gamma"),
    (lambda: spending.hwang_shih_decani(float("nan")), "gamma"),
    (lambda: spending.hwang_shih_decani("steep"), "gamma"),
    (lambda: spending.power_family(0), "rho"),
    (lambda: spending.power_family(-1), "rho"),
    (lambda: spending.power_family(float("inf")), "rho"),
    (lambda: spending.by_name("no-such-function"), "spending"),
    (lambda: spending.by_name("hwang-shih-decani"), "gamma"),
    (lambda: spending.by_name("power"), "rho"),
    (lambda: spending.from_dict({"family": "nope"}), "family"),
])
def test_bad_inputs_raise_valueerror_naming_the_argument(call, argument):
    with pytest.raises(ValueError, match=f"^{argument}: "):
        call()


@pytest.mark.parametrize("name, param, want", [
    ("obrien-fleming-type", None, spending.obrien_fleming()),
    ("OBrien_Fleming type", None, spending.obrien_fleming()),
    ("pocock-type", None, spending.pocock()),
    ("hwang-shih-decani", -4, spending.hwang_shih_decani(-4)),
    ("hsd", 1, spending.hwang_shih_decani(1)),
    ("power", 3, spending.power_family(3)),
])
def test_by_name(name, param, want):
    assert spending.by_name(name, param) == want


@pytest.mark.parametrize("f", [p.values[0] for p in FAMILIES]
                         + [spending.from_table([0.3, 0.6], [0.1, 0.5])])
def test_document_round_trip(f):
    d = json.loads(json.dumps(f.to_dict()))
    g = spending.from_dict(d)
    assert g == f
    np.testing.assert_array_equal(g(T_GRID, 0.05), f(T_GRID, 0.05))
    assert isinstance(f.label, str) and f.label
