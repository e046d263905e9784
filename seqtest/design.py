"""Group-sequential plans: boundaries, maximum information, operating characteristics.

A plan is computed on the canonical scale (see :mod:`seqtest.boundaries`). Its
*drift* is ``delta * sqrt(I_max)``: the mean of the final z statistic when the
true effect is the one the plan is powered for. Dividing by the fixed-sample drift
``z_{1-alpha/sides} + z_{1-beta}`` gives the inflation factor, and a metric (see
:mod:`seqtest.sizing`) turns ``I_max`` into users per arm.

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
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import optimize, special

from seqtest import classical, spending
from seqtest.boundaries import (
    DEFAULT_R,
    _solve_monotone,
    _solve_upper,
    _State,
    constant_bounds,
    crossing_probabilities,
    spending_bounds,
)
from seqtest.spending import SpendingFunction

__all__ = ["Plan", "design", "Characteristics", "parse_boundary", "MAX_LOOKS"]

MAX_LOOKS = 50
PLAN_KIND = "group_sequential"

Boundary = SpendingFunction | classical.ClassicalBoundary


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


def _is_whole(x: Any) -> bool:
    if isinstance(x, bool) or not isinstance(x, (int, float, np.integer, np.floating)):
        return False
    return math.isfinite(float(x)) and float(x).is_integer()


def _check_fractions(looks: int | None, info_fractions: Sequence[float] | None) -> np.ndarray:
    if info_fractions is None:
        if looks is None:
            raise ValueError("looks: give the number of looks or info_fractions")
        if not _is_whole(looks) or not 1 <= looks <= MAX_LOOKS:
            raise ValueError(f"looks: got {looks!r}; allowed is an integer from 1 to "
                             f"{MAX_LOOKS}")
        k = int(looks)
        return np.arange(1, k + 1) / k
    try:
        t = np.asarray(info_fractions, dtype=float).ravel()
    except (TypeError, ValueError):
        raise ValueError(f"info_fractions: got {info_fractions!r}; allowed is a list of "
                         "numbers") from None
    if t.size == 0 or t.size > MAX_LOOKS:
        raise ValueError(f"info_fractions: got {t.size} values; allowed is 1 to "
                         f"{MAX_LOOKS} looks")
    if np.any(~np.isfinite(t)) or t[0] <= 0 or t[-1] > 1 or np.any(np.diff(t) <= 0):
        raise ValueError(f"info_fractions: got {t.tolist()}; allowed is strictly "
                         "increasing values in (0, 1] ending at 1")
    if not math.isclose(t[-1], 1.0, abs_tol=1e-12):
        raise ValueError(f"info_fractions: got {t.tolist()}; the last look must be at "
                         "fraction 1 (the maximum information)")
    if looks is not None and (not _is_whole(looks) or int(looks) != t.size):
        raise ValueError(f"looks: got {looks!r} but info_fractions has {t.size} values")
    t[-1] = 1.0
    return t


def _check_prob(name: str, value: Any, lo: float, hi: float, what: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        v = math.nan
    if not (lo < v <= hi) or isinstance(value, bool):
        raise ValueError(f"{name}: got {value!r}; allowed is {what}")
    return v


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
        Metric description for sample sizes (see :mod:`seqtest.sizing`).
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
    cumulative_alpha: np.ndarray = field(default=None, repr=False)  # type: ignore[assignment]

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
    def nominal_p(self) -> np.ndarray:
        """Nominal p-value threshold per look (two-sided p for two-sided plans)."""
        return self.sides * special.ndtr(-self.efficacy_z)

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
        cr = _crossing_for(self.info_fractions, self.efficacy_z, self.futility_z,
                           self.sides, e * self.drift, self.r)
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

    def power_curve(self, effects: Sequence[float]) -> np.ndarray:
        """Probability of rejecting in the positive direction at each effect."""
        return np.array([self.characteristics(e).reject for e in np.ravel(effects)])

    def sample_size(self) -> Any:
        """Users per arm for the plan's metric (see :func:`seqtest.sizing.sample_size`)."""
        from seqtest.sizing import sample_size
        if self.metric is None:
            raise ValueError("metric: this plan has no metric; give one to design()")
        return sample_size(self, **self.metric)

    # -- documents -------------------------------------------------------------------
    def to_dict(self) -> dict:
        """The whole plan as plain JSON types; :meth:`from_dict` reads it back."""
        from seqtest import __version__
        return {
            "kind": PLAN_KIND,
            "version": __version__,
            "inputs": {
                "alpha": self.alpha,
                "sides": self.sides,
                "power": self.power,
                "info_fractions": self.info_fractions.tolist(),
                "efficacy": self.efficacy.to_dict(),
                "futility": None if self.futility is None else self.futility.to_dict(),
                "binding": self.binding,
                "metric": self.metric,
                "grid_r": self.r,
            },
            "computed": {
                "efficacy_z": _json_floats(self.efficacy_z),
                "futility_z": None if self.futility_z is None else _json_floats(self.futility_z),
                "cumulative_alpha": _json_floats(self.cumulative_alpha),
                "nominal_p": _json_floats(self.nominal_p),
                "drift": self.drift,
                "fixed_drift": self.fixed_drift,
                "inflation": self.inflation,
            },
        }

    @classmethod
    def from_dict(cls, d: dict) -> Plan:
        """Read a plan document written by :meth:`to_dict` (no recomputation)."""
        from seqtest.plans import check_document
        check_document(d, PLAN_KIND)
        try:
            inp, comp = d["inputs"], d["computed"]
            t = _check_fractions(None, inp["info_fractions"])
            eff = parse_boundary(inp["efficacy"], "efficacy")
            fut = parse_boundary(inp["futility"], "futility")
            plan = cls(
                alpha=float(inp["alpha"]), sides=int(inp["sides"]), power=float(inp["power"]),
                info_fractions=t,
                efficacy_z=_from_json_floats(comp["efficacy_z"], np.inf),
                futility_z=None if comp["futility_z"] is None
                else _from_json_floats(comp["futility_z"], -np.inf),
                drift=float(comp["drift"]), efficacy=eff, futility=fut,  # type: ignore[arg-type]
                binding=bool(inp["binding"]), metric=inp.get("metric"),
                r=int(inp.get("grid_r", DEFAULT_R)),
                cumulative_alpha=_from_json_floats(comp["cumulative_alpha"], np.nan),
            )
        except KeyError as exc:
            raise ValueError(f"plan: the document lacks the field {exc.args[0]!r}") from None
        if plan.efficacy_z.size != t.size:
            raise ValueError("plan: efficacy_z and info_fractions differ in length")
        return plan


def _json_floats(a: np.ndarray) -> list:
    return [float(x) if math.isfinite(x) else None for x in np.asarray(a, float)]


def _from_json_floats(v: list, fill: float) -> np.ndarray:
    return np.array([fill if x is None else float(x) for x in v], dtype=float)


# -- the solver --------------------------------------------------------------------

def _efficacy_bounds(t: np.ndarray, alpha: float, sides: int, eff: Boundary,
                     futility_z: np.ndarray | None, r: int) -> np.ndarray:
    if isinstance(eff, SpendingFunction):
        return spending_bounds(t, eff(t, alpha / sides), sides=sides, futility=futility_z, r=r)
    shape, fixed = eff.shape(t)
    return constant_bounds(t, alpha, shape, sides=sides, fixed=fixed, futility=futility_z, r=r)


def _futility_bounds(t: np.ndarray, drift: float, a: np.ndarray, sides: int,
                     beta: float, fut: SpendingFunction, r: int,
                     final: bool = True) -> np.ndarray:
    """Beta-spending futility boundary under the design alternative, given ``a``.

    ``t`` are information fractions (values above 1 spend all of beta); when
    ``final`` the last look's futility boundary is the efficacy boundary."""
    k = t.size
    cum = fut(np.minimum(t, 1.0), beta)
    inc = np.diff(np.concatenate(([0.0], cum)))
    b = np.empty(k)
    state = _State.origin(drift)
    for j in range(k):
        if j == k - 1 and final:
            b[j] = a[j]
            break
        b[j] = _solve_futility(state, t[j], inc[j], a[j], sides)
        if j == k - 1:
            break
        if sides == 1:
            iv = [(b[j], a[j])] if b[j] < a[j] else []
        else:
            bb = max(b[j], 0.0)
            iv = [(-a[j], -bb), (bb, a[j])] if bb < a[j] else []
        state = state.advance(iv, t[j], r, t[j + 1])
    return b


def _solve_futility(state: _State, info: float, target: float, a: float, sides: int) -> float:
    if sides == 1:
        def fun(x: float) -> tuple[float, float]:
            return state.prob_below(x, info), state.density(x, info)
        floor = -40.0
    else:
        def fun(x: float) -> tuple[float, float]:
            return (state.prob_between(-x, x, info),
                    state.density(x, info) + state.density(-x, info))
        floor = 0.0
    if target <= 0.0:
        return -np.inf if sides == 1 else 0.0
    top = min(a, 40.0)
    if fun(top)[0] <= target:
        return a
    if sides == 2 and target <= 0.0:
        return floor
    mass = state.mass()
    mu = state.theta * math.sqrt(info)
    if sides == 1:
        x0 = mu + float(special.ndtri(min(max(target / max(mass, 1e-300), 1e-300), 0.5)))
    else:
        x0 = min(top, target / max(2 * state.density(0.0, info), 1e-300))
    return _solve_monotone(fun, target, floor, top, x0, decreasing=False)


def _crossing_for(t: np.ndarray, a: np.ndarray, b: np.ndarray | None, sides: int,
                  drift: float, r: int) -> Any:
    """Exit probabilities of a plan's regions: efficacy ``a`` (and ``-a`` two-sided),
    futility ``b`` as a lower boundary (one-sided) or an inner band (two-sided)."""
    lo = -a if sides == 2 else np.full(t.size, -np.inf)
    il = iu = None
    if b is not None:
        if sides == 1:
            lo = np.minimum(b, a)
        else:
            w = np.clip(b, 0.0, a)
            il, iu = -w, w
    return crossing_probabilities(a, lo, t, drift, inner_lower=il, inner_upper=iu, r=r)


def _power(t: np.ndarray, a: np.ndarray, b: np.ndarray | None, sides: int, drift: float,
           r: int) -> float:
    return float(_crossing_for(t, a, b, sides, drift, r).upper.sum())


def _solve_drift(power_at: Any, target: float, start: float) -> float:
    """Drift at which the increasing function ``power_at`` equals ``target``.

    The root is sought on the probit scale, ``ndtri(power) - ndtri(target)``, which is
    nearly linear in the drift: secant steps from the fixed-sample drift, with the
    Anderson-Bjorck bracketing method as the fallback, to ``|g| < 1e-12`` (about
    1e-12 on the drift); it takes three or four evaluations.
    """
    goal = float(special.ndtri(target))

    def g(d: float) -> float:
        return float(special.ndtri(min(max(power_at(d), 1e-300), 1 - 1e-16))) - goal

    # Secant steps first: the probit of the power rises about one unit per unit of
    # drift (exactly so with one look), so from the fixed-sample drift two or three
    # steps reach |g| < 1e-12. Any sign change seen is kept as a bracket, and the
    # bracketing method below takes over if the steps misbehave.
    x0 = 0.999 * start
    g0 = g(x0)
    x1 = x0 - g0
    seen = [(x0, g0)]
    for _ in range(6):
        if not (0.3 * start < x1 < 5.0 * start):
            break
        g1 = g(x1)
        seen.append((x1, g1))
        if abs(g1) < 1e-12:
            return x1
        if g1 == g0:
            break
        x0, g0, x1 = x1, g1, x1 - g1 * (x1 - x0) / (g1 - g0)
    below = [(x, v) for x, v in seen if v < 0]
    above = [(x, v) for x, v in seen if v > 0]
    if below and above:
        lo, g_lo = max(below)
        hi, g_hi = min(above)
        if lo < hi:
            return _bracketed_root(g, lo, hi, g_lo, g_hi)
    # Group-sequential plans need a little more information than the fixed design
    # (inflation 1 to about 1.5), so a tight first bracket saves evaluations.
    lo, hi = 0.999 * start, 1.25 * start
    g_lo, g_hi = g(lo), g(hi)
    while g_lo > 0:
        lo, hi, g_hi = lo * 0.8, lo, g_lo
        g_lo = g(lo)
        if lo < 1e-6:
            raise ValueError("power: no drift reaches the requested power")
    while g_hi < 0:
        lo, g_lo, hi = hi, g_hi, hi * 1.25
        g_hi = g(hi)
        if hi > 1e3:
            raise ValueError("power: no drift reaches the requested power")
    return _bracketed_root(g, lo, hi, g_lo, g_hi)


def _bracketed_root(g: Any, lo: float, hi: float, g_lo: float, g_hi: float,
                    xtol: float = 1e-11) -> float:
    """Anderson-Bjorck bracketing root finder (regula falsi with the Anderson-Bjorck
    weight), which keeps the root bracketed and converges superlinearly; on a nearly
    linear function it needs two or three evaluations."""
    if g_lo == 0:
        return lo
    if g_hi == 0:
        return hi
    side = 0
    for _ in range(100):
        x = hi - g_hi * (hi - lo) / (g_hi - g_lo)
        if not lo < x < hi:
            x = 0.5 * (lo + hi)
        gx = g(x)
        if gx == 0 or hi - lo < xtol * max(1.0, abs(x)):
            return x
        if (gx > 0) == (g_hi > 0):
            m = 1 - gx / g_hi
            hi, g_hi = x, gx
            if side == 1:
                g_lo *= m if m > 0 else 0.5
            side = 1
        else:
            m = 1 - gx / g_lo
            lo, g_lo = x, gx
            if side == -1:
                g_hi *= m if m > 0 else 0.5
            side = -1
        if abs(gx) < 1e-13:
            return x
    return 0.5 * (lo + hi)


def design(
    alpha: float = 0.05,
    sides: int = 2,
    power: float = 0.9,
    looks: int | None = None,
    info_fractions: Sequence[float] | None = None,
    efficacy: Any = None,
    futility: Any = None,
    binding: bool = False,
    *,
    metric: dict | None = None,
    r: int = DEFAULT_R,
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
        Planned information fractions, strictly increasing, ending at 1.
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
        "mde": 0.01}``; see :func:`seqtest.sizing.sample_size`.
    r : int
        Grid size of the numerical integration (default 24).

    Returns
    -------
    Plan

    Notes
    -----
    Efficacy boundaries: error spending (Lan and DeMets 1983) or classical
    constants, by the recursion of :mod:`seqtest.boundaries`. With futility, the
    boundary is found by beta spending under the design alternative and the drift
    (so the maximum information) is solved by Brent's method so that the power is
    exactly ``power`` with the futility boundary in place, the two boundaries
    meeting at the last look (Pampallona and Tsiatis 1994; Jennison and Turnbull
    2000, section 7.3). Accuracy is that of the integration (see
    :mod:`seqtest.boundaries`): z boundaries within 1e-6 below 5, the power at the
    solved drift within 1e-7 per look, so the drift and the inflation factor within
    about 1e-6 for up to 10 looks and 1e-5 for 50 (``tests/test_accuracy.py``).

    Examples
    --------
    >>> import seqtest
    >>> plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=5,
    ...                       efficacy=seqtest.spending.obrien_fleming())
    >>> plan.efficacy_z.round(3).tolist()
    [4.877, 3.357, 2.68, 2.29, 2.031]
    """
    if sides not in (1, 2) or isinstance(sides, bool):
        raise ValueError(f"sides: got {sides!r}; allowed are 1 (one-sided) and 2 "
                         "(symmetric two-sided)")
    a = _check_prob("alpha", alpha, 0.0, 0.5 * sides,
                    f"a number in (0, {0.5 * sides:g}] (at most 0.5 per tail)")
    p = _check_prob("power", power, a / sides, 1.0 - 1e-12,
                    f"a number above alpha/sides = {a / sides:g} and below 1")
    if p >= 1.0:
        raise ValueError(f"power: got {power!r}; allowed is below 1")
    if info_fractions is None:
        t = _check_fractions(5 if looks is None else looks, None)
    else:
        t = _check_fractions(looks, info_fractions)
    eff = parse_boundary(SpendingFunction("obrien_fleming") if efficacy is None else efficacy,
                         "efficacy")
    fut = parse_boundary(futility, "futility")
    if fut is not None and not isinstance(fut, SpendingFunction):
        raise ValueError(f"futility: got {futility!r}; a futility boundary is made by beta "
                         "spending, so give a spending function")
    if not isinstance(binding, bool):
        raise ValueError(f"binding: got {binding!r}; allowed are True and False")
    if metric is not None:
        from seqtest.sizing import check_metric
        metric = check_metric(metric)
    beta = 1.0 - p
    fixed = float(-special.ndtri(a / sides) - special.ndtri(beta))

    b: np.ndarray | None = None
    if fut is None or t.size == 1:
        eff_z = _efficacy_bounds(t, a, sides, eff, None, r)
        drift = _solve_drift(lambda d: _power(t, eff_z, None, sides, d, r), p, fixed)
        fut = None if t.size == 1 else fut
    elif not binding:
        eff_z = _efficacy_bounds(t, a, sides, eff, None, r)

        def g(d: float) -> float:
            return _power(t, eff_z, _futility_bounds(t, d, eff_z, sides, beta, fut, r),
                          sides, d, r)
        drift = _solve_drift(g, p, fixed)
        b = _futility_bounds(t, drift, eff_z, sides, beta, fut, r)
    else:
        def both(d: float) -> tuple[np.ndarray, np.ndarray]:
            return _binding_bounds(t, a, sides, eff, fut, beta, d, r)

        def g(d: float) -> float:
            ez, fz = both(d)
            return _power(t, ez, fz, sides, d, r)
        drift = _solve_drift(g, p, fixed)
        eff_z, b = both(drift)

    if isinstance(eff, SpendingFunction) and not (binding and b is not None):
        # error spending spends exactly f(t) per tail (to the solver's 1e-12)
        cum_alpha = sides * np.asarray(eff(t, a / sides), float)
    else:
        cum_alpha = _cumulative_null(t, eff_z, b if binding else None, sides, r)
    return Plan(alpha=a, sides=int(sides), power=p, info_fractions=t, efficacy_z=eff_z,
                futility_z=b, drift=float(drift), efficacy=eff, futility=fut,
                binding=bool(binding and b is not None), metric=metric, r=r,
                cumulative_alpha=cum_alpha)


def _binding_bounds(t: np.ndarray, alpha: float, sides: int, eff: Boundary,
                    fut: SpendingFunction, beta: float, drift: float, r: int,
                    final: bool = True, cum_alpha: np.ndarray | None = None,
                    ) -> tuple[np.ndarray, np.ndarray]:
    """Efficacy and futility boundaries that account for each other (binding).

    ``cum_alpha`` (per tail) overrides the spending function's cumulative alpha."""
    k = t.size
    if isinstance(eff, SpendingFunction):
        tc = np.minimum(t, 1.0)
        ca = eff(tc, alpha / sides) if cum_alpha is None else cum_alpha
        inc_a = np.diff(np.concatenate(([0.0], ca))) * sides
        inc_b = np.diff(np.concatenate(([0.0], fut(tc, beta))))
        a = np.empty(k)
        b = np.empty(k)
        s0, s1 = _State.origin(0.0), _State.origin(drift)
        for j in range(k):
            prev_floor = 0.0 if sides == 2 else -40.0
            a[j] = _solve_upper(s0, t[j], inc_a[j], sides, prev_floor)
            if j == k - 1 and final:
                b[j] = a[j]
                break
            b[j] = _solve_futility(s1, t[j], inc_b[j], a[j], sides)
            if j == k - 1:
                break
            iv = _continuation_iv(a[j], b[j], sides)
            s0 = s0.advance(iv, t[j], r, t[j + 1])
            s1 = s1.advance(iv, t[j], r, t[j + 1])
        return a, b
    shape, fixed = eff.shape(t)

    def level(c: float) -> tuple[float, np.ndarray, np.ndarray]:
        aa = np.where(fixed, shape, c * shape)
        bb = _futility_bounds(t, drift, aa, sides, beta, fut, r)
        cr = _crossing_for(t, aa, bb, sides, 0.0, r)
        tot = cr.upper.sum() + (cr.lower.sum() if sides == 2 else 0.0)
        return float(tot), aa, bb

    # While the drift is still being searched, a futility boundary can stop nearly
    # every path before the scaled looks; the constant then has to go low (even
    # below zero for Haybittle-Peto's final look). If even that cannot reach alpha,
    # the lowest constant is used and the drift search moves on.
    lo_c, hi_c = -20.0, 20.0
    if level(lo_c)[0] < alpha:
        c = lo_c
    else:
        c = optimize.brentq(lambda c: level(c)[0] - alpha, lo_c, hi_c, xtol=1e-12)
    _, aa, bb = level(c)
    return aa, bb


def _continuation_iv(a: float, b: float, sides: int) -> list[tuple[float, float]]:
    if sides == 1:
        return [(b, a)] if b < a else []
    bb = max(b, 0.0)
    return [(-a, -bb), (bb, a)] if bb < a else []


def _cumulative_null(t: np.ndarray, a: np.ndarray, b: np.ndarray | None, sides: int,
                     r: int) -> np.ndarray:
    cr = _crossing_for(t, a, b, sides, 0.0, r)
    return np.cumsum(cr.upper + (cr.lower if sides == 2 else 0.0))
