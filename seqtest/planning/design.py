"""Group-sequential plans: boundaries, maximum information, operating characteristics.

A plan is computed on the canonical scale (see :mod:`seqtest.core.recursion`). Its
*drift* is ``delta * sqrt(I_max)``: the mean of the final z statistic when the
true effect is the one the plan is powered for. Dividing by the fixed-sample drift
``z_{1-alpha/sides} + z_{1-beta}`` gives the inflation factor, and a metric (see
:mod:`seqtest.planning.sizing`) turns ``I_max`` into users per arm.

References
----------
.. [1] Jennison, C. and Turnbull, B. W. (2000). Group Sequential Methods with
       Applications to Clinical Trials. Chapman & Hall/CRC, chapters 2, 4, 7, 19.
.. [2] Lan, K. K. G. and DeMets, D. L. (1983). Biometrika 70, 659-663.
.. [3] Pampallona, S. and Tsiatis, A. A. (1994). Group sequential designs for
       one-sided and two-sided hypothesis testing with provision for early stopping
       in favor of the null hypothesis. JSPI 42, 19-35.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
from numpy.typing import ArrayLike
from scipy import special

from seqtest.core import checks, classical, spending
from seqtest.core.boundaries import (
    Boundary,
    binding_with_power,
    efficacy_bounds,
    futility_with_power,
)
from seqtest.core.errors import InputError
from seqtest.core.jsonable import floats_or_none
from seqtest.core.recursion import DEFAULT_R
from seqtest.core.region import Region
from seqtest.core.roots import NoRoot, solve
from seqtest.core.spending import SpendingFunction
from seqtest.core.version import __version__
from seqtest.planning.sizing import check_metric, max_control, per_look, sample_size

__all__ = ["Plan", "design", "Characteristics", "parse_boundary", "MAX_LOOKS"]

MAX_LOOKS = 50
PLAN_KIND = "group_sequential"


# -- inputs ------------------------------------------------------------------------

def parse_boundary(value: Any, argument: str) -> Boundary | None:
    """Turn a boundary argument into an object.

    Accepted: a spending function object; a classical boundary object; ``None``;
    a dict written by ``to_dict``; or a name: ``"obrien-fleming-type"``,
    ``"pocock-type"`` (spending functions), ``"hsd:<gamma>"``, ``"power:<rho>"``,
    ``"obrien-fleming"``, ``"pocock"`` (classical constants),
    ``"wang-tsiatis:<Delta>"``, ``"haybittle-peto"`` or ``"haybittle-peto:<z>"``.
    """
    if value is None or isinstance(value, (SpendingFunction, classical.ClassicalBoundary)):
        return value
    if isinstance(value, dict):
        if value.get("type") == "classical":
            return classical.from_dict(value)
        return spending.from_dict(value)
    if not isinstance(value, str):
        raise ValueError(f"{argument}: got {value!r}; allowed is a spending function, a "
                         "classical boundary or a name")
    name, _, param = value.strip().lower().replace("_", "-").partition(":")
    try:
        p = float(param) if param else None
    except ValueError:
        raise ValueError(f"{argument}: got {value!r}; the part after ':' must be a "
                         "number") from None
    if name in ("obrien-fleming", "of", "obf"):
        return classical.obrien_fleming()
    if name == "pocock":
        return classical.pocock()
    if name in ("wang-tsiatis", "wt"):
        if p is None:
            raise ValueError(f"{argument}: wang-tsiatis needs Delta, e.g. 'wang-tsiatis:0.25'")
        return classical.wang_tsiatis(p)
    if name == "haybittle-peto":
        return classical.haybittle_peto(3.0 if p is None else p)
    try:
        return spending.by_name(name, p)
    except ValueError:
        raise ValueError(
            f"{argument}: got {value!r}; allowed are obrien-fleming-type, pocock-type, "
            "hsd:<gamma>, power:<rho> (spending functions), obrien-fleming, pocock, "
            "wang-tsiatis:<Delta>, haybittle-peto[:<z>] (classical)") from None


def _check_fractions(looks: Any, fractions: Any,
                     name: str = "information_fractions") -> np.ndarray:
    """Planned information fractions from a number of equally spaced looks or a list."""
    if fractions is None:
        if looks is None:
            raise checks.fail("looks", None, f"the number of looks, or {name}")
        k = checks.whole("looks", looks, lo=1, hi=MAX_LOOKS)
        return np.arange(1, k + 1) / k
    if isinstance(fractions, (str, bytes)) or not hasattr(fractions, "__len__"):
        raise checks.fail(name, fractions, "a list of numbers")
    values = [checks.number(f"{name}[{i}]", v) for i, v in enumerate(fractions)]
    t = np.asarray(values, dtype=float).ravel()
    if t.size == 0 or t.size > MAX_LOOKS:
        raise InputError(f"{name}: got {t.size} values; allowed is 1 to {MAX_LOOKS} looks")
    if t[0] <= 0 or t[-1] > 1 + 1e-12 or np.any(np.diff(t) <= 0):
        raise checks.fail(name, t.tolist(), "strictly increasing values in (0, 1] ending "
                                            "at 1")
    if not math.isclose(t[-1], 1.0, abs_tol=1e-12):
        raise checks.fail(name, t.tolist(), "values ending at 1 (the maximum information)")
    if looks is not None and checks.whole("looks", looks, lo=1, hi=MAX_LOOKS) != t.size:
        raise InputError(f"looks: got {looks!r} but {name} has {t.size} values")
    t[-1] = 1.0
    return t


MIN_GRID_R = 8
MAX_GRID_R = 64


def _check_r(r: Any) -> int:
    return checks.whole("r", r, lo=MIN_GRID_R, hi=MAX_GRID_R,
                        allowed=f"a whole number from {MIN_GRID_R} to {MAX_GRID_R} (grid size "
                                "of the numerical integration)")


# -- the plan ----------------------------------------------------------------------

@dataclass(frozen=True)
class Characteristics:
    """Operating characteristics of a plan at one effect.

    Attributes
    ----------
    effect : float
        True effect in units of the effect the plan is powered for (0 = null,
        1 = the design alternative).
    efficacy_upper, efficacy_lower, futility : ndarray
        Per-look probabilities of stopping for efficacy in the positive direction,
        in the negative direction (two-sided plans), and for futility.
    reject : float
        Probability of rejecting the null in the positive direction (the power at
        ``effect > 0``; the upper-tail type I error at 0).
    reject_any : float
        Probability of rejecting the null in either direction.
    expected_fraction : float
        Expected information at stopping as a fraction of the maximum
        (futility boundaries obeyed).
    expected_ratio : float
        The same, relative to the fixed-sample design with the same alpha and power.
    """

    effect: float
    efficacy_upper: np.ndarray
    efficacy_lower: np.ndarray
    futility: np.ndarray
    reject: float
    reject_any: float
    expected_fraction: float
    expected_ratio: float

    @property
    def stop(self) -> np.ndarray:
        return self.efficacy_upper + self.efficacy_lower + self.futility


@dataclass(frozen=True)
class Plan:
    """A group-sequential plan; build it with :func:`design`.

    Attributes
    ----------
    alpha, sides, power : float, int, float
        Overall type I error, one or two sided (two-sided spends alpha/2 per tail),
        and the power at the design effect.
    info_fractions : ndarray
        Planned information fraction of each look (the last is 1).
    efficacy_z : ndarray
        Upper efficacy boundary per look (the lower one is ``-efficacy_z`` for a
        two-sided plan); ``inf`` at a look that spends nothing.
    futility_z : ndarray or None
        Futility boundary per look: stop when ``Z_k < futility_z[k]`` (one-sided) or
        ``|Z_k| < futility_z[k]`` (two-sided). Meets the efficacy boundary at the end.
    drift : float
        ``delta * sqrt(I_max)``.
    inflation : float
        Maximum information over the fixed-sample information.
    efficacy, futility : spending function or classical boundary
        How the boundaries were made.
    binding : bool
        Whether the efficacy boundaries account for the futility boundary.
    metric : dict or None
        Metric description for sample sizes (see :mod:`seqtest.planning.sizing`).
    cumulative_alpha : ndarray
        Type I error spent by each look (both tails together for a two-sided plan).
    n_control, n_treatment : ndarray or None
        Users (exposure, for rates) per arm at each planned look, cumulative and
        rounded up, when the plan has a metric (see :mod:`seqtest.planning.sizing`).
    notes : tuple of str
        What a reader of the plan should know, e.g. that it was written by an earlier
        release that computed some numbers a little differently.
    """

    alpha: float
    sides: int
    power: float
    info_fractions: np.ndarray
    efficacy_z: np.ndarray
    futility_z: np.ndarray | None
    drift: float
    efficacy: Boundary
    futility: SpendingFunction | None
    binding: bool
    metric: dict | None = None
    r: int = DEFAULT_R
    cumulative_alpha: np.ndarray = field(default=None, repr=False)  # type: ignore[arg-type]
    notes: tuple[str, ...] = field(default=(), repr=False)
    n_control: np.ndarray | None = field(default=None, repr=False)
    n_treatment: np.ndarray | None = field(default=None, repr=False)

    # -- derived quantities ----------------------------------------------------------
    @property
    def looks(self) -> int:
        return int(self.info_fractions.size)

    @property
    def fixed_drift(self) -> float:
        """``z_{1-alpha/sides} + z_{1-beta}``, the fixed-sample drift."""
        return float(-special.ndtri(self.alpha / self.sides) - special.ndtri(1 - self.power))

    @property
    def inflation(self) -> float:
        return float((self.drift / self.fixed_drift) ** 2)

    @property
    def p_threshold(self) -> np.ndarray:
        """The p-value a look must reach to stop for efficacy (two-sided p for two-sided
        plans): the efficacy boundary on the p scale."""
        return self.sides * special.ndtr(-self.efficacy_z)

    @property
    def nominal_p(self) -> np.ndarray:
        """The first release's name of :attr:`p_threshold`."""
        return self.p_threshold

    def max_information(self, delta: float) -> float:
        """Maximum information ``(drift / delta)^2`` for a design effect ``delta``."""
        d = float(delta)
        if not math.isfinite(d) or d == 0:
            raise ValueError(f"delta: got {delta!r}; allowed is a non-zero finite effect")
        return (self.drift / d) ** 2

    def characteristics(self, effect: float = 1.0) -> Characteristics:
        """Per-look stopping probabilities, power and expected information.

        Parameters
        ----------
        effect : float
            True effect in units of the design effect (0 is the null).
        """
        e = float(effect)
        if not math.isfinite(e):
            raise ValueError(f"effect: got {effect!r}; allowed is a finite number")
        cr = Region.of_plan(self.sides, self.efficacy_z, self.futility_z).crossing(
            self.info_fractions, e * self.drift, self.r)
        if self.sides == 2:
            eff_lo, fut = cr.lower, cr.inner
        else:
            eff_lo, fut = np.zeros(self.looks), cr.lower
        stop = cr.upper + eff_lo + fut
        # paths that never stop can only exist through rounding at the last look
        stop_frac = float(stop @ self.info_fractions + max(0.0, 1.0 - stop.sum()))
        return Characteristics(e, cr.upper, eff_lo, fut, float(cr.upper.sum()),
                               float(cr.upper.sum() + eff_lo.sum()), stop_frac,
                               stop_frac * self.inflation)

    def power_curve(self, effects: ArrayLike) -> np.ndarray:
        """Probability of rejecting in the positive direction at each effect."""
        return np.array([self.characteristics(e).reject for e in np.ravel(effects)])

    def sample_size(self) -> Any:
        """Users per arm for the plan's metric (see :func:`seqtest.planning.sizing.sample_size`).

        Computed once per plan (the expected sizes need two passes of the recursion)
        and kept: every call returns the same object, its arrays read-only."""
        if self.metric is None:
            raise ValueError("metric: this plan has no metric; give one to design()")
        cached = self.__dict__.get("_sample_size")
        if cached is None:
            cached = sample_size(self, **self.metric)
            for value in vars(cached).values():
                if isinstance(value, np.ndarray):
                    value.setflags(write=False)
            self.__dict__["_sample_size"] = cached
        return cached

    @property
    def information_fractions(self) -> np.ndarray:
        """Planned information fraction of each look (``info_fractions`` is the same)."""
        return self.info_fractions

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Plan):
            return NotImplemented
        return self.to_dict()["inputs"] == other.to_dict()["inputs"] and bool(
            self.to_dict()["computed"] == other.to_dict()["computed"])

    __hash__ = None  # type: ignore[assignment]

    # -- display ---------------------------------------------------------------------
    def summary(self) -> str:
        """The plan in a few plain lines (see :func:`seqtest.reporting.plan_summary`)."""
        from seqtest.reporting.summary import plan_summary
        return plan_summary(self)

    def _repr_html_(self) -> str:
        """The notebook display: the summary and the table of looks with users per arm."""
        from seqtest.reporting.html import plan_html
        return plan_html(self)

    # -- documents -------------------------------------------------------------------
    def to_dict(self) -> dict:
        """The plan document: plain JSON types; :func:`seqtest.plan_from_dict` reads it
        back (and checks the computed part against the inputs)."""
        return {
            "kind": PLAN_KIND,
            "version": __version__,
            "inputs": {
                "alpha": self.alpha,
                "sides": self.sides,
                "power": self.power,
                "information_fractions": self.info_fractions.tolist(),
                "efficacy": self.efficacy.to_dict(),
                "futility": None if self.futility is None else self.futility.to_dict(),
                "binding": self.binding,
                "metric": self.metric,
                "grid_r": self.r,
            },
            "computed": {
                "efficacy_z": floats_or_none(self.efficacy_z),
                "futility_z": None if self.futility_z is None
                else floats_or_none(self.futility_z),
                "cumulative_alpha": floats_or_none(self.cumulative_alpha),
                "p_threshold": floats_or_none(self.p_threshold),
                "sample_size": None if self.n_control is None or self.n_treatment is None
                else {"control": [int(x) for x in self.n_control],
                      "treatment": [int(x) for x in self.n_treatment]},
                "drift": self.drift,
                "fixed_drift": self.fixed_drift,
                "inflation": self.inflation,
            },
        }


# -- the solver --------------------------------------------------------------------

def _power(t: np.ndarray, a: np.ndarray, b: np.ndarray | None, sides: int, drift: float,
           r: int) -> float:
    """Probability of rejecting in the positive direction (the power at ``drift > 0``)."""
    return float(Region.of_plan(sides, a, b).crossing(t, drift, r).upper.sum())


def _predicted(tried: dict[float, np.ndarray], d: float) -> np.ndarray | None:
    """Boundaries at drift ``d`` predicted from those at the drifts tried so far (in
    the order tried): on the line through the last two, since boundaries move
    smoothly with the drift; the last one alone when that is all there is. Only a
    starting point for the searches, which find the same roots from anywhere."""
    if not tried:
        return None
    ds = list(tried)
    b1 = tried[ds[-1]]
    if len(ds) < 2 or ds[-1] == ds[-2]:
        return b1
    b0 = tried[ds[-2]]
    with np.errstate(invalid="ignore"):
        out = b1 + (b1 - b0) * ((d - ds[-1]) / (ds[-1] - ds[-2]))
    return np.where(np.isfinite(out), out, b1)


def _solve_drift(power_at: Any, target: float, start: float, futility: bool = False
                 ) -> float:
    """Drift at which the increasing function ``power_at`` equals ``target``.

    The root is sought on the probit scale, ``ndtri(power) - ndtri(target)``, which is
    nearly linear in the drift (exactly so with one look, slope 1), by
    :func:`seqtest.core.roots.solve` from the fixed-sample drift, to ``|g| < 1e-9``:
    the power within 2e-10 of the target, the drift within about 2e-9, both far
    inside the integration's own accuracy (1e-7 per look on the power). A futility
    boundary spent under the drift itself flattens that slope (to 0.4 to 0.9 at the
    root): with ``futility`` the first secant step assumes 1 / 1.5. It takes three or
    four evaluations without futility, five to seven with it.
    """
    goal = float(special.ndtri(target))

    def g(d: float) -> float:
        return float(special.ndtri(min(max(power_at(d), 1e-300), 1 - 1e-16))) - goal

    try:
        return solve(g, 0.999 * start, step=1.5 if futility else 1.0, lo=1e-6, hi=1e3,
                     gtol=1e-9, xtol=1e-13)
    except NoRoot:
        raise ValueError("power: no drift reaches the requested power") from None


def design(
    alpha: float = 0.05,
    sides: int = 2,
    power: float = 0.9,
    looks: int | None = None,
    info_fractions: ArrayLike | None = None,
    efficacy: Any = None,
    futility: Any = None,
    binding: bool = False,
    *,
    metric: dict | None = None,
    r: int = DEFAULT_R,
    information_fractions: ArrayLike | None = None,
) -> Plan:
    """Design a group-sequential plan.

    Parameters
    ----------
    alpha : float
        Overall type I error, at most 0.5 per tail. A two-sided plan spends
        ``alpha / 2`` on each tail with the one-sided spending function.
    sides : {1, 2}
        One-sided (reject for a positive effect) or symmetric two-sided.
    power : float
        Power at the design effect, above ``alpha / sides`` and below 1.
    looks : int, optional
        Number of equally spaced looks, 1 to 50 (default 5). When ``info_fractions``
        is given as well, the two must agree.
    info_fractions : array_like, optional
        Planned information fractions, strictly increasing, ending at 1 (also accepted
        as ``information_fractions``, the name in plan documents).
    efficacy : spending function, classical boundary or name
        Default: Lan-DeMets O'Brien-Fleming-type spending. Names: see
        :func:`parse_boundary` (``"pocock"`` and ``"obrien-fleming"`` are the
        classical constants; ``"pocock-type"`` and ``"obrien-fleming-type"`` the
        spending functions).
    futility : spending function or name, optional
        Beta-spending function for a futility boundary; ``None`` for none.
    binding : bool
        ``False`` (default): the efficacy boundaries are computed ignoring futility,
        so stopping for futility is optional and the type I error holds whether or
        not it is obeyed. ``True``: the efficacy boundaries take the futility
        boundary into account (a little smaller), which is valid only if futility
        stops are always obeyed.
    metric : dict, optional
        Metric for sample sizes, e.g. ``{"kind": "binary", "baseline": 0.10,
        "mde": 0.01}``; see :func:`seqtest.planning.sizing.sample_size`.
    r : int
        Grid size of the numerical integration (default 24, at most 64).

    Returns
    -------
    Plan

    Notes
    -----
    Efficacy boundaries: error spending (Lan and DeMets 1983) or classical
    constants, by the recursion of :mod:`seqtest.core.recursion`. With futility, the
    boundary is found by beta spending under the design alternative and the drift
    (so the maximum information) is solved by Brent's method so that the power is
    exactly ``power`` with the futility boundary in place, the two boundaries
    meeting at the last look (Pampallona and Tsiatis 1994; Jennison and Turnbull
    2000, section 7.3). Accuracy is that of the integration (see
    :mod:`seqtest.core.recursion`): z boundaries within 1e-6 below 5, the power at
    the solved drift within 1e-7 per look, so the drift and the inflation factor
    within about 1e-6 for up to 10 looks and 1e-5 for 50 (``tests/test_accuracy.py``).

    Examples
    --------
    >>> import seqtest
    >>> plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=5,
    ...                       efficacy=seqtest.spending.obrien_fleming())
    >>> plan.efficacy_z.round(3).tolist()
    [4.877, 3.357, 2.68, 2.29, 2.031]
    """
    sides = int(checks.choice("sides", sides, (1, 2)))
    a = checks.number("alpha", alpha, lo=0.0, hi=0.5 * sides, lo_open=True,
                      allowed=f"a number in (0, {0.5 * sides:g}] (at most 0.5 per tail)")
    p = checks.number("power", power, lo=a / sides, hi=1.0, lo_open=True, hi_open=True,
                      allowed=f"a number above alpha/sides = {a / sides:g} and below 1")
    name = "info_fractions"
    if information_fractions is not None:
        if info_fractions is not None:
            raise checks.fail("info_fractions", info_fractions, "left out when "
                              "information_fractions is given (they are one argument)")
        info_fractions, name = information_fractions, "information_fractions"
    if info_fractions is None:
        t = _check_fractions(5 if looks is None else looks, None)
    else:
        t = _check_fractions(looks, info_fractions, name)
    r = _check_r(r)
    eff = parse_boundary(SpendingFunction("obrien_fleming") if efficacy is None else efficacy,
                         "efficacy")
    assert eff is not None
    fut = parse_boundary(futility, "futility")
    if fut is not None and not isinstance(fut, SpendingFunction):
        raise ValueError(f"futility: got {futility!r}; a futility boundary is made by beta "
                         "spending, so give a spending function")
    binding = checks.boolean("binding", binding)
    if metric is not None:
        metric = check_metric(metric)
    beta = 1.0 - p
    fixed = float(-special.ndtri(a / sides) - special.ndtri(beta))

    b: np.ndarray | None = None
    if fut is None or t.size == 1:
        eff_z = efficacy_bounds(t, a, sides, eff, None, r)
        drift = _solve_drift(lambda d: _power(t, eff_z, None, sides, d, r), p, fixed)
        fut = None if t.size == 1 else fut
    elif not binding:
        eff_z = efficacy_bounds(t, a, sides, eff, None, r)

        # the power at each trial drift from the futility boundary's own recursion,
        # each search starting from the boundary predicted by the drifts tried before
        tried: dict[float, np.ndarray] = {}

        def power_at(d: float) -> float:
            tried[d], pw = futility_with_power(t, d, eff_z, sides, beta, fut, r,
                                               start=_predicted(tried, d))
            return pw
        drift = _solve_drift(power_at, p, fixed, futility=True)
        b = tried[drift] if drift in tried else futility_with_power(
            t, drift, eff_z, sides, beta, fut, r, start=_predicted(tried, drift))[0]
    else:
        pairs: dict[float, np.ndarray] = {}

        def power_binding(d: float) -> float:
            near = _predicted(pairs, d)
            ez, fz, pw = binding_with_power(t, a, sides, eff, fut, beta, d, r,
                                            start=None if near is None else (near[0], near[1]))
            pairs[d] = np.stack([ez, fz])
            return pw
        drift = _solve_drift(power_binding, p, fixed, futility=True)
        if drift in pairs:
            eff_z, b = pairs[drift][0], pairs[drift][1]
        else:
            near = _predicted(pairs, drift)
            assert near is not None
            eff_z, b, _ = binding_with_power(t, a, sides, eff, fut, beta, drift, r,
                                             start=(near[0], near[1]))

    if isinstance(eff, SpendingFunction) and not (binding and b is not None):
        # error spending spends exactly f(t) per tail (to the solver's 1e-12)
        cum_alpha = sides * np.asarray(eff(t, a / sides), float)
    else:
        region = Region.of_plan(sides, eff_z, b if binding else None)
        cum_alpha = np.cumsum(region.efficacy_probability(t, 0.0, r))
    plan = Plan(alpha=a, sides=int(sides), power=p, info_fractions=t, efficacy_z=eff_z,
                futility_z=b, drift=float(drift), efficacy=eff, futility=fut,
                binding=bool(binding and b is not None), metric=metric, r=r,
                cumulative_alpha=cum_alpha)
    if metric is None:
        return plan
    n_c = max_control(plan, metric)[0]
    n_ctrl, n_trt = per_look(n_c, metric["allocation"], t)
    return replace(plan, n_control=n_ctrl, n_treatment=n_trt)
