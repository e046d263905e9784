"""Monte Carlo check of a stopping plan, on the same decision code as monitoring.

:func:`simulate` runs many synthetic experiments of a
:class:`~seqtest.simulation.scenarios.Scenario` through the plan and reports the rejection
rate (the type I error under the null, the power otherwise) with its Clopper-Pearson
interval, the expected sample size and the distribution of the stopping look, next to a
naive baseline that tests at nominal alpha at every look.

Nothing here re-implements the rules. At each look the per-arm cumulative totals go
through :func:`seqtest.monitoring.metrics.effect` (vectorised over replicates and looks)
for the z statistic on the test scale; the information fraction is ``(n_control +
n_treatment) / max_n`` exactly as :func:`seqtest.monitoring.analysis.analyze` measures
it; the boundaries come from
:meth:`seqtest.monitoring.rules.GroupSequentialRule.boundaries` on those observed
fractions, computed exactly once per distinct pattern of fractions in each chunk (one
call per chunk for fixed traffic; fractions are never rounded to share boundaries);
the stop is :meth:`seqtest.core.region.Region.classify` and
:func:`seqtest.core.region.first_stop`. With random traffic every replicate has its own
fractions; the exact screen of :mod:`seqtest.simulation.screen` settles the replicates
whose decision provable bounds on their boundaries make certain (nearly all of them
when futility is absent or ignored), and only the rest get their boundaries, so the
decisions are those of the exact boundaries at a fraction of the cost.
Mixture (continuous-monitoring) plans go through
:func:`seqtest.core.normal_mixture.always_valid`, with the looks that are not analysed
masked.

Data are drawn as per-arm totals at each look, increment by increment:

- binary: successes ``Binomial(m, p)`` for ``m`` new users;
- normal: the new users' mean ``N(mu, sd**2 / m)`` and, independent of it, their
  centred sum of squares ``sd**2 * chi2(m - 1)`` (drawn as twice a gamma variate),
  which is the exact joint law of the sufficient statistics ``(sum, sum_sq)``
  (Cochran's theorem);
- log-normal (revenue): the number of paying users is ``Binomial(m, 1 - zero_share)``
  and their amounts are drawn one by one (the sums of log-normal values have no
  closed form, and a normal approximation of ``sum_sq`` would be far off for
  heavy tails), in blocks of at most 4 million values so memory stays bounded;
- counts: events ``Poisson(lambda m)``, or, with a dispersion ``k``, the sum of
  ``m`` negative binomial counts, which is negative binomial with shape ``m k``
  (exact); analysed as a count metric, which needs the sum of the squared counts,
  every user's count is drawn (Poisson, or Poisson with a gamma-distributed mean),
  in blocks of at most 1 million users;
- ratio: every user's denominator ``1 + Poisson(denominator_mean - 1)``, gamma
  multiplier ``G`` (shape ``dispersion``, mean 1) and numerator ``Poisson(D rate G)``,
  summed with their squares and products, in blocks of at most 1 million users;
- pre_period: the exact joint law of the bivariate normal sufficient statistics of
  the new users: their two means ``N(mu, Sigma / m)`` and, independent of them, their
  centred scatter matrix ``Wishart(m - 1, Sigma)``, drawn by Bartlett's decomposition
  (``L A A' L'`` with ``L`` the Cholesky factor of ``Sigma`` and ``A`` lower
  triangular, ``A_11^2 ~ chi2(m - 1)``, ``A_22^2 ~ chi2(m - 2)``, ``A_21 ~ N(0, 1)``;
  Bartlett 1933, Anderson 2003 sec. 7.2).

Traffic: ``fixed`` and ``uneven`` give every replicate the same per-arm counts
``ceil(n_arm_max * tau)`` at look time ``tau``; ``random`` draws the users arriving
between looks from a gamma-mixed Poisson process (negative binomial counts with
shape ``(tau_j - tau_{j-1}) days / cv**2``), splits them between the arms
binomially, cuts the look that passes the maximum to exactly the maximum
(hypergeometric split of the users that fit) and, with ``final = "at_max"``, tops
the last look up to the maximum.

A look is analysed when it has new users and both arms have enough units for the
metric (binary and rate: 1, continuous: 2), as an analyst would; a look whose
fraction reaches 1 is the final one; the last analysed look is declared final
(it spends all the alpha left).

Reproducibility: replicates are simulated in chunks of a fixed size; chunk ``i``
draws from ``numpy.random.default_rng(SeedSequence(seed, spawn_key=(i,)))``, so a
run is reproducible bit for bit from ``(plan, scenario, reps, seed, chunk_size)``
whatever runs the chunks (this process, local processes, a Dask cluster: see
:mod:`seqtest.simulation.runner`) and however many workers, and totals are summed in
chunk order in integers.

Monte Carlo accuracy: the rejection count is binomial, so its exact (Clopper-Pearson)
interval is reported (``scipy.stats.binomtest(k, n).proportion_ci(method="exact")``);
the expected sample size carries its standard error ``sd / sqrt(reps)``.

References
----------
.. [1] Clopper, C. J. and Pearson, E. S. (1934). The use of confidence or fiducial
       limits illustrated in the case of the binomial. Biometrika 26, 404-413.
.. [2] Jennison, C. and Turnbull, B. W. (2000). Group Sequential Methods with
       Applications to Clinical Trials, chapters 1, 7 and 19.
.. [3] Cochran, W. G. (1934). The distribution of quadratic forms in a normal
       system. Proc. Cambridge Philos. Soc. 30, 178-191.
.. [4] Anderson, T. W. (2003). An Introduction to Multivariate Statistical Analysis,
       3rd ed., Wiley, sec. 7.2 (Bartlett's decomposition of the Wishart law).
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable
from concurrent.futures import Executor
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
from scipy import special, stats

from seqtest.core.normal_mixture import always_valid
from seqtest.core.region import Region, first_stop
from seqtest.core.vocabulary import Decision
from seqtest.monitoring import metrics
from seqtest.monitoring.rules import GroupSequentialRule, flip, orientation
from seqtest.planning.design import Plan
from seqtest.planning.documents import plan_from_dict
from seqtest.simulation import DEFAULT_CHUNK
from seqtest.simulation.runner import Batch, Runner
from seqtest.simulation.scenarios import Scenario
from seqtest.simulation.screen import settle

__all__ = [
    "OUTCOMES",
    "NaiveSummary",
    "Prepared",
    "SimulationResult",
    "clopper_pearson",
    "plot_result",
    "prepare",
    "simulate",
]

#: Columns of :attr:`SimulationResult.stops`: how a replicate ended at a look.
OUTCOMES: tuple[str, ...] = ("stop_efficacy_upper", "stop_efficacy_lower",
                             Decision.STOP_FUTILITY.value, Decision.COMPLETE.value)

_MAX_CELLS = 1_000_000          # replicates x looks per chunk (memory bound)
_LOGNORMAL_BLOCK = 4_000_000    # log-normal values drawn at once
_UNIT_BLOCK = 1_000_000         # users drawn one by one at once (ratio, counts)
_MIN_UNITS = {"binary": 1, "continuous": 2, "rate": 1, "ratio": 2, "adjusted": 2, "count": 2}


# ---------------------------------------------------------------------------
# Monte Carlo intervals
# ---------------------------------------------------------------------------


def clopper_pearson(k: int, n: int, confidence: float = 0.95) -> tuple[float, float]:
    """Exact (Clopper-Pearson) confidence interval for a binomial proportion.

    Parameters
    ----------
    k, n : int
        Successes and trials, ``0 <= k <= n``, ``n >= 1``.
    confidence : float
        Two-sided confidence level in (0, 1).

    Returns
    -------
    (lower, upper) : tuple of float
        ``lower`` is the ``(1 - confidence) / 2`` quantile of ``Beta(k, n - k + 1)``
        (0 when ``k = 0``), ``upper`` the ``(1 + confidence) / 2`` quantile of
        ``Beta(k + 1, n - k)`` (1 when ``k = n``); the interval covers the true
        proportion with probability at least `confidence`. Computed by
        ``scipy.stats.binomtest(k, n).proportion_ci(confidence, method="exact")``.

    References
    ----------
    .. [1] Clopper and Pearson (1934), Biometrika 26, 404-413.
    """
    if isinstance(n, bool) or int(n) != n or n < 1:
        raise ValueError(f"n: got {n!r}; allowed is a whole number >= 1")
    if isinstance(k, bool) or int(k) != k or not 0 <= k <= n:
        raise ValueError(f"k: got {k!r}; allowed is a whole number in [0, n = {n}]")
    c = float(confidence)
    if not 0 < c < 1:
        raise ValueError(f"confidence: got {confidence!r}; allowed is a level in (0, 1)")
    ci = stats.binomtest(int(k), int(n)).proportion_ci(confidence_level=c, method="exact")
    return float(ci.low), float(ci.high)


# ---------------------------------------------------------------------------
# Results
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class NaiveSummary:
    """The naive baseline: a fixed-sample test at nominal alpha at every look.

    Attributes
    ----------
    z : float
        The nominal critical value ``z_{1 - alpha / sides}``.
    rejections, rate, ci_lower, ci_upper : int, float, float, float
        Replicates that rejected at some look, their share, its interval.
    expected_total : float
        Mean total sample at the stop of the naive rule.
    stops : ndarray, shape (looks, 4)
        Stops per look and outcome (columns as :data:`OUTCOMES`).
    """

    z: float
    rejections: int
    rate: float
    ci_lower: float
    ci_upper: float
    expected_total: float
    stops: np.ndarray


@dataclass(frozen=True)
class TailRate:
    """Rejections in one direction, against the error the plan promises there.

    Attributes
    ----------
    direction : {"upper", "lower"}
        Treatment better (upper) or control better (lower).
    rejections, rate, ci_lower, ci_upper : int, float, float, float
        Count, share of replicates, and its exact (Clopper-Pearson) interval.
    alpha : float
        The plan's error in this direction: alpha for a one-sided plan's upper tail,
        alpha / 2 for each tail of a two-sided plan.
    """

    direction: str
    rejections: int
    rate: float
    ci_lower: float
    ci_upper: float
    alpha: float

    @property
    def leaks(self) -> bool:
        """The interval's lower end is above the tail's alpha."""
        return self.ci_lower > self.alpha


@dataclass(frozen=True)
class SimulationResult:
    """What :func:`simulate` found for one plan and one scenario.

    Attributes
    ----------
    scenario, description : str
    plan_kind : {"group_sequential", "mixture"}
    plan_label : str
    alpha : float
    sides : int
    data_kind, analysis_kind, scale, traffic : str
    futility : {"obey", "ignore"}
    reps, seed, chunk_size : int
    null : bool
        No true effect: `rate` is the type I error.
    true_effect : float
        The true effect on the plan's analysis scale.
    confidence : float
        Level of the Clopper-Pearson intervals.
    rejections, rejections_upper, rejections_lower : int
        Replicates stopped for efficacy (in total, treatment better, control better).
    rate, ci_lower, ci_upper : float
        ``rejections / reps`` and its exact interval.
    tails : tuple of TailRate
        Each direction a plan promises an error for, with its own interval: the upper
        tail of a one-sided plan (at alpha), both tails of a two-sided one (alpha / 2
        each). Under the null a plan must hold every tail, not only the total.
    design_rate : float or None
        What the plan promises: alpha under the null; under an effect given as a
        multiple of the design effect, the plan's power at it (normal theory,
        planned looks, futility obeyed); otherwise None.
    verdict : str
        ``"holds alpha"`` or ``"leaks alpha"`` under the null (the lower end of the
        interval of the total above alpha, or of a tail above its share), naming the
        tail that leaks; under an effect, how the power compares with `design_rate`.
    look_times : ndarray
        Scheduled look times as fractions of the maximum sample.
    mean_fraction : ndarray
        Mean observed information fraction at each look among the replicates that
        analysed it (nan if none did).
    stops : ndarray, shape (looks, 4)
        Replicates stopping at each look, by outcome (columns :data:`OUTCOMES`).
    expected_total, expected_total_se : float
        Mean total sample (both arms; exposure for counts) at the stop, and its
        Monte Carlo standard error.
    max_total : float
        The maximum total sample (denominator of the information fraction).
    naive : NaiveSummary or None
    boundary_calls : int
        Distinct fraction patterns among the replicates (one per chunk for fixed
        traffic): the boundary computations of a run without the screen (see
        :meth:`seqtest.monitoring.rules.GroupSequentialRule.boundaries`).
    boundaries_computed : int
        Boundary computations actually made: fewer than `boundary_calls` when the
        exact screen (:mod:`seqtest.simulation.screen`) settled replicates without
        their boundaries. The only number that depends on the screen.
    paths : dict or None
        Per-replicate arrays when ``keep_paths=True`` (not in :meth:`to_dict`).
    """

    scenario: str
    description: str
    plan_kind: str
    plan_label: str
    alpha: float
    sides: int
    data_kind: str
    analysis_kind: str
    scale: str
    traffic: str
    futility: str
    reps: int
    seed: int
    chunk_size: int
    null: bool
    true_effect: float
    confidence: float
    rejections: int
    rejections_upper: int
    rejections_lower: int
    rate: float
    ci_lower: float
    ci_upper: float
    tails: tuple[TailRate, ...]
    design_rate: float | None
    verdict: str
    look_times: np.ndarray
    mean_fraction: np.ndarray
    stops: np.ndarray
    expected_total: float
    expected_total_se: float
    max_total: float
    naive: NaiveSummary | None
    boundary_calls: int
    boundaries_computed: int
    paths: dict | None = field(default=None, repr=False, compare=False)

    @property
    def looks(self) -> int:
        return int(self.look_times.size)

    @property
    def stop_share(self) -> np.ndarray:
        """Share of replicates stopping at each look (any outcome)."""
        return self.stops.sum(axis=1) / self.reps

    @property
    def leaks(self) -> bool:
        """Under the null: the interval of the total, or of a tail, lies above what the
        plan promises."""
        return self.null and (self.ci_lower > self.alpha or any(t.leaks for t in self.tails))

    def to_dict(self) -> dict:
        """Plain JSON types (non-finite numbers become None)."""
        def num(x: float | None) -> float | None:
            return None if x is None or not math.isfinite(x) else float(x)

        looks = []
        for j in range(self.looks):
            row = {"look": j + 1, "time": num(self.look_times[j]),
                   "mean_fraction": num(self.mean_fraction[j])}
            row.update({o: int(self.stops[j, i]) for i, o in enumerate(OUTCOMES)})
            looks.append(row)
        out: dict[str, Any] = {
            "scenario": self.scenario,
            "description": self.description,
            "plan": {"kind": self.plan_kind, "label": self.plan_label,
                     "alpha": self.alpha, "sides": self.sides},
            "data_kind": self.data_kind,
            "analysis_kind": self.analysis_kind,
            "scale": self.scale,
            "traffic": self.traffic,
            "futility": self.futility,
            "reps": self.reps,
            "seed": self.seed,
            "chunk_size": self.chunk_size,
            "null": self.null,
            "true_effect": num(self.true_effect),
            "measure": "type_i_error" if self.null else "power",
            "rejections": self.rejections,
            "rejections_upper": self.rejections_upper,
            "rejections_lower": self.rejections_lower,
            "rate": self.rate,
            "confidence": self.confidence,
            "ci_lower": self.ci_lower,
            "ci_upper": self.ci_upper,
            "tails": {t.direction: {"rejections": t.rejections, "rate": t.rate,
                                    "ci_lower": t.ci_lower, "ci_upper": t.ci_upper,
                                    "alpha": t.alpha} for t in self.tails},
            "design_rate": num(self.design_rate),
            "verdict": self.verdict,
            "expected_total": num(self.expected_total),
            "expected_total_se": num(self.expected_total_se),
            "max_total": num(self.max_total),
            "expected_fraction": num(self.expected_total / self.max_total),
            "boundary_calls": self.boundary_calls,
            "boundaries_computed": self.boundaries_computed,
            "looks": looks,
            "naive": None,
        }
        if self.naive is not None:
            nv = self.naive
            out["naive"] = {"z": nv.z, "rejections": nv.rejections, "rate": nv.rate,
                            "ci_lower": nv.ci_lower, "ci_upper": nv.ci_upper,
                            "expected_total": num(nv.expected_total),
                            "rejections_by_look": [int(x) for x in nv.stops[:, :2].sum(1)]}
        return out

    def table(self) -> str:
        """A plain-text report: headline numbers, then one row per look."""
        what = "Type I error" if self.null else "Power (rejection rate)"
        pct = f"{self.confidence:.0%}"
        lines = [
            f"Scenario {self.scenario!r}: {self.reps:,} simulated experiments (seed "
            f"{self.seed})",
            f"  plan: {self.plan_label}",
            f"  data: {self.data_kind} analysed as {self.analysis_kind} ({self.scale}); "
            f"true effect {self.true_effect:g}; traffic {self.traffic}; futility "
            f"{self.futility}",
            f"{what}: {self.rate:.4f}  ({pct} Clopper-Pearson {self.ci_lower:.4f} to "
            f"{self.ci_upper:.4f})" + (f"; plan: {self.design_rate:.4f}"
                                         if self.design_rate is not None else ""),
            *[f"  {t.direction} tail ({'treatment' if t.direction == 'upper' else 'control'}"
              f" better): {t.rate:.4f}  ({pct} CI {t.ci_lower:.4f} to {t.ci_upper:.4f})"
              + (f"; plan: {t.alpha:g}" if self.null else "") for t in self.tails],
            f"Verdict: {self.verdict}",
        ]
        if self.naive is not None:
            nv = self.naive
            test = f"|z| >= {nv.z:.3f}" if self.sides == 2 else f"z >= {nv.z:.3f}"
            lines.append(f"Naive baseline ({test} at every look): {nv.rate:.4f}  "
                         f"({pct} CI {nv.ci_lower:.4f} to {nv.ci_upper:.4f})")
        lines.append(f"Expected total sample: {self.expected_total:,.1f} +- "
                     f"{self.expected_total_se:,.1f} (MC s.e.), "
                     f"{self.expected_total / self.max_total:.1%} of the maximum "
                     f"{self.max_total:,.0f}")
        lines.append("")
        head = ["look", "time", "fraction", *OUTCOMES, "stopped", "cum_reject"]
        rows = []
        cum = np.cumsum(self.stops[:, :2].sum(axis=1)) / self.reps
        share = self.stop_share
        for j in range(self.looks):
            rows.append([str(j + 1), f"{self.look_times[j]:.3f}",
                         "-" if not math.isfinite(self.mean_fraction[j])
                         else f"{self.mean_fraction[j]:.3f}",
                         *[f"{int(x):,}" for x in self.stops[j]],
                         f"{share[j]:.2%}", f"{cum[j]:.4f}"])
        widths = [max(len(h), *(len(r[i]) for r in rows)) for i, h in enumerate(head)]
        lines.append("  ".join(h.rjust(w) for h, w in zip(head, widths, strict=True)))
        lines.append("  ".join("-" * w for w in widths))
        for r in rows:
            lines.append("  ".join(c.rjust(w) for c, w in zip(r, widths, strict=True)))
        return "\n".join(lines)


# ---------------------------------------------------------------------------
# Setting up a run
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class _Job:
    """Everything a worker needs to simulate a chunk (picklable)."""

    plan: Any
    mixture: bool
    kind: str            # analysis kind for metrics.effect
    scale: str
    sides: int
    alpha: float
    data_kind: str
    control: dict
    treatment: dict
    times: np.ndarray    # scheduled look times, fractions of the maximum
    n_max: int
    arm_max: tuple[float, float]
    share: float         # treatment share of the users
    mode: str
    fixed_counts: tuple[np.ndarray, np.ndarray] | None
    days: float
    cv: float
    cap: bool
    at_max: bool
    obey: bool
    naive_z: float
    seed: int
    chunk: int
    keep_paths: bool
    screen: bool = False  # settle replicates by the exact screen (random traffic)
    null: float = 0.0     # the plan's margin: the null value of the effect
    sign: float = 1.0     # -1 where lower is better: decisions on -z


def _plan_metric(plan: Any) -> dict | None:
    return getattr(plan, "metric", None) or None


def _plan_scale(plan: Any) -> str:
    if isinstance(plan, Plan):
        return str((_plan_metric(plan) or {}).get("scale", "difference"))
    return str(plan.scale)


def _design_means(plan: Any) -> tuple[float, float, bool]:
    """(control mean, treatment mean, relative?) the plan is powered for (a mixture
    plan's from its metric when it tests against a margin, else from its mde)."""
    m = _plan_metric(plan)
    if m is not None and (isinstance(plan, Plan) or m.get("margin")):
        if m.get("kind") == "ratio":
            base = m["numerator_mean"] / m["denominator_mean"]
        else:
            base = m.get("baseline", 0.0) or 0.0
        rel = bool(m.get("relative")) or m.get("scale") == "relative"
        m_t = base * (1.0 + m["mde"]) if m.get("relative") else base + m["mde"]
        return base, m_t, rel
    if isinstance(plan, Plan):
        raise ValueError("effect.mde_multiple: the plan has no metric, so it has no "
                         "design effect; give effect.difference or effect.relative")
    if getattr(plan, "mde", None) is None:
        raise ValueError("effect.mde_multiple: the mixture plan has no mde; give "
                         "effect.difference or effect.relative")
    rel = plan.scale == "relative"
    return (1.0, 1.0 + plan.mde, True) if rel else (0.0, plan.mde, False)


def _margin(plan: Any) -> tuple[float, float]:
    """The plan's ``(null, sign)`` (:func:`seqtest.monitoring.rules.orientation`)."""
    return orientation(plan)


def _arms(plan: Any, sc: Scenario) -> tuple[dict, dict, float, float]:
    """Per-arm data parameters, the true effect on the analysis scale, and m_c.

    With a margin, ``mde_multiple`` is measured from it: 0 is the margin (the null),
    1 the effect the plan is powered for."""
    m_c = sc.control_mean()
    null = _margin(plan)[0]
    if sc.effect_type == "difference":
        m_t = m_c + sc.effect
    elif sc.effect_type == "relative":
        m_t = m_c * (1.0 + sc.effect)
    elif null != 0:
        b_c, b_t, _ = _design_means(plan)
        if _plan_scale(plan) == "relative":
            m_t = m_c * (1.0 + null + sc.effect * ((b_t / b_c - 1.0) - null))
        else:
            m_t = m_c + null + sc.effect * ((b_t - b_c) - null)
    else:
        b_c, b_t, rel = _design_means(plan)
        if rel:
            if b_c == 0:
                raise ValueError("effect.mde_multiple: the plan's baseline is 0, so a "
                                 "relative design effect is undefined")
            m_t = m_c * (1.0 + sc.effect * (b_t / b_c - 1.0))
        else:
            m_t = m_c + sc.effect * (b_t - b_c)
    ctrl: dict[str, Any]
    trt: dict[str, Any]
    d = sc.data
    k = sc.data_kind
    if k == "binary":
        if not 0 < m_t < 1:
            raise ValueError(f"effect: gives a treatment rate of {m_t:g}; allowed effects "
                             "keep it inside (0, 1)")
        ctrl, trt = {"p": d["rate"]}, {"p": m_t}
    elif k == "normal":
        ctrl = {"mean": d["mean"], "sd": d["sd"]}
        trt = {"mean": m_t, "sd": d.get("sd_treatment", d["sd"])}
    elif k == "ratio":
        if not m_t > 0:
            raise ValueError(f"effect: gives a treatment rate of {m_t:g}; allowed effects "
                             "keep it > 0")
        base = {"denominator_mean": d["denominator_mean"],
                "dispersion": d.get("dispersion")}
        ctrl, trt = {**base, "rate": d["rate"]}, {**base, "rate": m_t}
    elif k == "pre_period":
        base = {"sd": d["sd"], "correlation": d["correlation"], "pre_mean": d["mean"]}
        ctrl, trt = {**base, "mean": d["mean"]}, {**base, "mean": m_t}
    elif k == "lognormal":
        if not m_t > 0:
            raise ValueError(f"effect: gives a treatment mean of {m_t:g}; allowed effects "
                             "keep it > 0")
        z = d.get("zero_share", 0.0)
        s2 = math.log1p((d["sd"] / d["mean"]) ** 2)
        mu = math.log(d["mean"]) - 0.5 * s2
        ctrl = {"mu": mu, "sigma": math.sqrt(s2), "zero_share": z}
        trt = {"mu": mu + math.log(m_t / m_c), "sigma": math.sqrt(s2), "zero_share": z}
    else:
        if not m_t > 0:
            raise ValueError(f"effect: gives a treatment rate of {m_t:g}; allowed effects "
                             "keep it > 0")
        ctrl = {"rate": d["rate"], "dispersion": d.get("dispersion")}
        trt = {"rate": m_t, "dispersion": d.get("dispersion")}
    return ctrl, trt, m_t, m_c


def _check_kind(plan: Any, sc: Scenario) -> tuple[str, str]:
    """(analysis kind, scale) after checking the plan's metric against the data."""
    m = _plan_metric(plan)
    kind = sc.analysis_kind_for(None if m is None else m.get("kind"))
    if m is not None and m.get("kind") != kind:
        raise ValueError(f"data.kind: the scenario's {sc.data_kind} data are analysed as "
                         f"a {kind} metric but the plan is for a {m.get('kind')} metric")
    if isinstance(plan, Plan):
        scale = (m or {}).get("scale", "difference")
    else:
        scale = plan.scale
    if scale == "relative" and sc.data_kind in ("normal", "pre_period") and \
            sc.data["mean"] == 0:
        raise ValueError("data.mean: got 0; a plan on the relative scale needs a non-zero "
                         "control mean")
    return kind, scale


def _sizes(plan: Any, sc: Scenario, share: float) -> tuple[int, tuple[float, float]]:
    """Maximum total sample and per-arm maxima."""
    t = sc.traffic
    if t.max_total is not None:
        n = int(t.max_total)
        return n, (n * (1.0 - share), n * share)
    if isinstance(plan, Plan):
        if plan.metric is None:
            raise ValueError("traffic.max_total: the plan has no metric (so no sample "
                             "size); give the maximum total over both arms")
        ss = plan.sample_size()
        plan_alloc = float(plan.metric.get("allocation", 1.0))
        if math.isclose(plan_alloc, share / (1.0 - share), rel_tol=1e-12):
            return int(ss.n_control + ss.n_treatment), (float(ss.n_control),
                                                        float(ss.n_treatment))
        n = int(ss.n_control + ss.n_treatment)
        return n, (n * (1.0 - share), n * share)
    cap = plan.max_n_per_arm
    if cap is None:
        raise ValueError("traffic.max_total: the mixture plan has no max_n_per_arm; give "
                         "the maximum total over both arms")
    a = share / (1.0 - share)
    n_c, n_t = (cap / a, float(cap)) if a >= 1 else (float(cap), cap * a)
    n_c, n_t = math.ceil(n_c - 1e-9), math.ceil(n_t - 1e-9)
    return int(n_c + n_t), (float(n_c), float(n_t))


def _schedule(plan: Any, sc: Scenario) -> np.ndarray:
    t = sc.traffic
    mixture = not isinstance(plan, Plan)
    if t.mode == "uneven":
        base = np.asarray(t.fractions, float)
        if t.looks is not None:
            raise ValueError("traffic.looks: uneven traffic takes its looks from "
                             "traffic.fractions")
    elif mixture:
        n = 100 if t.looks is None else t.looks
        base = np.arange(1, n + 1) / n
    else:
        if t.looks is not None:
            raise ValueError("traffic.looks: a group-sequential plan fixes its own looks; "
                             "use traffic.extra_looks for unplanned ones or uneven traffic")
        base = np.asarray(plan.info_fractions, float)
    extra = [x for x in t.extra_looks if not np.any(np.isclose(base, x, rtol=0, atol=1e-12))]
    times = np.sort(np.concatenate([base, np.asarray(extra, float)]))
    if np.any(times[:-1] >= 1.0):
        k = int(np.argmax(times >= 1.0)) + 1
        raise ValueError(f"traffic.fractions: look {k} is at fraction {times[k - 1]:g}, "
                         "already the maximum, so later looks would never be analysed")
    return times


def _job(plan: Any, sc: Scenario, seed: int, chunk: int, keep_paths: bool,
         screen: bool = True) -> _Job:
    if isinstance(plan, dict):
        plan = plan_from_dict(plan)
    mixture = not isinstance(plan, Plan)
    if mixture and getattr(plan, "kind", None) != "mixture":
        raise ValueError(f"plan: got {type(plan).__name__}; allowed is a Plan, a "
                         "MixturePlan or a plan document")
    if not isinstance(sc, Scenario):
        raise ValueError(f"scenario: got {type(sc).__name__}; allowed is a Scenario (see "
                         "seqtest.simulation.scenarios.load_scenario)")
    kind, scale = _check_kind(plan, sc)
    alloc = sc.allocation
    if alloc is None:
        alloc = float((_plan_metric(plan) or {}).get("allocation", 1.0))
    share = alloc / (1.0 + alloc)
    ctrl, trt, _, _ = _arms(plan, sc)
    times = _schedule(plan, sc)
    n_max, arm_max = _sizes(plan, sc, share)
    fixed = None
    if sc.traffic.mode != "random":
        eps = 1.0 - 1e-12
        n_c = np.ceil(arm_max[0] * times * eps).astype(np.int64)
        n_t = np.ceil(arm_max[1] * times * eps).astype(np.int64)
        tot = n_c + n_t
        if np.any(np.diff(tot) <= 0):
            j = int(np.argmax(np.diff(tot) <= 0)) + 2
            raise ValueError(f"traffic: look {j} would have no new users (maximum total "
                             f"{n_max}); the maximum is too small for so many looks")
        fixed = (n_c, n_t)
    fut_obey = sc.futility == "obey"
    if not mixture and plan.binding and not fut_obey:
        raise ValueError("analysis.futility: the plan's futility boundary is binding, so "
                         "its efficacy boundaries are valid only when futility stops are "
                         "obeyed; use futility = \"obey\"")
    sides = int(plan.sides)
    # the screen needs per-replicate boundaries to save (random traffic) and no
    # futility boundary in play (a futility stop needs the boundary itself)
    use_screen = bool(screen and not mixture and fixed is None
                      and (plan.futility_z is None or not fut_obey))
    return _Job(
        plan=plan, mixture=mixture, kind=kind, scale=scale, sides=sides,
        alpha=float(plan.alpha), data_kind=sc.data_kind, control=ctrl, treatment=trt,
        times=times, n_max=int(n_max), arm_max=arm_max, share=share,
        mode=sc.traffic.mode, fixed_counts=fixed, days=sc.traffic.days, cv=sc.traffic.cv,
        cap=sc.traffic.cap, at_max=sc.traffic.final == "at_max", obey=fut_obey,
        naive_z=float(-special.ndtri(plan.alpha / sides)), seed=int(seed), chunk=chunk,
        keep_paths=keep_paths, screen=use_screen, null=_margin(plan)[0],
        sign=_margin(plan)[1])


# ---------------------------------------------------------------------------
# Drawing the data of one chunk
# ---------------------------------------------------------------------------


def _rng(job: _Job, index: int) -> np.random.Generator:
    return np.random.default_rng(np.random.SeedSequence(job.seed, spawn_key=(index,)))


def _draw_counts(job: _Job, rng: np.random.Generator, n: int
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Cumulative users per arm, shape (n, K), and the number of looks that happen."""
    k = job.times.size
    if job.fixed_counts is not None:
        c, t = job.fixed_counts
        return (np.broadcast_to(c, (n, k)), np.broadcast_to(t, (n, k)),
                np.full(n, k, dtype=np.int64))
    dt = np.diff(np.concatenate(([0.0], job.times)))
    mean = dt * job.n_max
    if job.cv > 0:
        shape = dt * job.days / (job.cv * job.cv)
        users = rng.negative_binomial(np.broadcast_to(shape, (n, k)),
                                      np.broadcast_to(shape / (shape + mean), (n, k)))
    else:
        users = rng.poisson(np.broadcast_to(mean, (n, k)))
    users = users.astype(np.int64)
    treat = rng.binomial(users, job.share).astype(np.int64)
    cu = np.cumsum(users, axis=1)
    ct = np.cumsum(treat, axis=1)
    end = np.full(n, k, dtype=np.int64)
    cap = job.n_max
    if job.cap:
        over = cu >= cap
        hit = over.any(axis=1)
        j = np.where(hit, np.argmax(over, axis=1), k - 1)
        rows = np.arange(n)
        prev_u = np.where(j > 0, cu[rows, np.maximum(j - 1, 0)], 0)
        prev_t = np.where(j > 0, ct[rows, np.maximum(j - 1, 0)], 0)
        inc_t = treat[rows, j]
        inc_c = users[rows, j] - inc_t
        need = np.where(hit, cap - prev_u, 0)
        cut_t = rng.hypergeometric(inc_t, inc_c, need)
        new_u = np.where(hit, cap, cu[rows, j])
        new_t = np.where(hit, prev_t + cut_t, ct[rows, j])
        cu[rows, j] = new_u
        ct[rows, j] = new_t
        later = np.arange(k)[None, :] > j[:, None]
        cu = np.where(later, new_u[:, None], cu)
        ct = np.where(later, new_t[:, None], ct)
        end = np.where(hit, j + 1, k)
    if job.at_max:
        short = np.maximum(cap - cu[:, -1], 0)
        extra_t = rng.binomial(short, job.share)
        top = end == k
        cu[:, -1] += np.where(top, short, 0)
        ct[:, -1] += np.where(top, extra_t, 0)
    return cu - ct, ct, end


def _increments(cum: np.ndarray) -> np.ndarray:
    return np.diff(cum, axis=1, prepend=0)


def _lognormal_sums(rng: np.random.Generator, m: np.ndarray, p: dict,
                    tick: Callable[[float], None] | None = None
                    ) -> tuple[np.ndarray, np.ndarray]:
    """Sums of values and of squares of ``m`` zero-inflated log-normal values each
    (``tick(share)`` after each block of values)."""
    z = p["zero_share"]
    b = m if z == 0 else rng.binomial(m, 1.0 - z)
    b = np.ascontiguousarray(b, dtype=np.int64).ravel()
    s1 = np.zeros(b.size)
    s2 = np.zeros(b.size)
    ends = np.cumsum(b)
    i = 0
    while i < b.size:
        base = ends[i - 1] if i else 0
        stop = max(i + 1, int(np.searchsorted(ends, base + _LOGNORMAL_BLOCK, side="right")))
        seg = b[i:stop]
        total = int(ends[stop - 1] - base)
        if total:
            x = rng.standard_normal(total)
            x *= p["sigma"]
            x += p["mu"]
            np.exp(x, out=x)
            nz = seg > 0
            offs = (np.cumsum(seg) - seg)[nz]
            s1[i:stop][nz] = np.add.reduceat(x, offs)
            np.multiply(x, x, out=x)
            s2[i:stop][nz] = np.add.reduceat(x, offs)
        i = stop
        if tick is not None:
            tick(i / b.size)
    return s1.reshape(m.shape), s2.reshape(m.shape)


def _unit_sums(rng: np.random.Generator, m: np.ndarray,
               draw: Callable[[np.random.Generator, int], tuple[np.ndarray, ...]],
               tick: Callable[[float], None] | None = None) -> list[np.ndarray]:
    """Per cell of ``m`` (new users per replicate and look), the sums of the per-user
    values ``draw(rng, size)`` returns (drawn user by user in blocks of at most
    :data:`_UNIT_BLOCK` users; ``tick(share)`` after each block)."""
    b = np.ascontiguousarray(m, dtype=np.int64).ravel()
    out: list[np.ndarray] | None = None
    ends = np.cumsum(b)
    i = 0
    while i < b.size:
        base = ends[i - 1] if i else 0
        stop = max(i + 1, int(np.searchsorted(ends, base + _UNIT_BLOCK, side="right")))
        seg = b[i:stop]
        total = int(ends[stop - 1] - base)
        values = draw(rng, total)
        if out is None:
            out = [np.zeros(b.size) for _ in values]
        if total:
            nz = seg > 0
            offs = (np.cumsum(seg) - seg)[nz]
            for acc, v in zip(out, values, strict=True):
                acc[i:stop][nz] = np.add.reduceat(v, offs)
        i = stop
        if tick is not None:
            tick(i / b.size)
    assert out is not None
    return [a.reshape(m.shape) for a in out]


def _count_draw(p: dict) -> Callable[[np.random.Generator, int], tuple[np.ndarray, ...]]:
    """Per-user counts (Poisson, or gamma-mixed Poisson with shape ``dispersion``) and
    their squares."""
    def draw(rng: np.random.Generator, size: int) -> tuple[np.ndarray, ...]:
        if p["dispersion"] is None:
            y = rng.poisson(p["rate"], size)
        else:
            k = p["dispersion"]
            y = rng.poisson(rng.gamma(k, p["rate"] / k, size))
        y = y.astype(float)
        return y, y * y
    return draw


def _ratio_draw(p: dict) -> Callable[[np.random.Generator, int], tuple[np.ndarray, ...]]:
    """Per-user denominators and numerators of the ratio data model, with the squares
    and the product."""
    def draw(rng: np.random.Generator, size: int) -> tuple[np.ndarray, ...]:
        d = 1.0 + rng.poisson(p["denominator_mean"] - 1.0, size)
        lam = d * p["rate"]
        if p["dispersion"] is not None:
            k = p["dispersion"]
            lam = lam * rng.gamma(k, 1.0 / k, size)
        x = rng.poisson(lam).astype(float)
        return x, d, x * x, d * d, x * d
    return draw


def _pre_period_sums(rng: np.random.Generator, m: np.ndarray, p: dict
                     ) -> tuple[np.ndarray, ...]:
    """Sums of y, y^2, x, x^2, x y over ``m`` new users with ``(y, x)`` bivariate normal
    (means ``mean`` and ``pre_mean``, common sd, correlation): the two means and,
    independent of them, the centred scatter matrix by Bartlett's decomposition
    (exact for every ``m``; ``m = 1`` has no scatter, ``m = 0`` no sums)."""
    sd, rho = p["sd"], p["correlation"]
    rest = math.sqrt(1.0 - rho * rho)
    mm = np.maximum(m, 1).astype(float)
    z1 = rng.standard_normal(m.shape)
    z2 = rng.standard_normal(m.shape)
    y_bar = p["mean"] + sd * z1 / np.sqrt(mm)
    x_bar = p["pre_mean"] + sd * (rho * z1 + rest * z2) / np.sqrt(mm)
    a11 = np.sqrt(2.0 * rng.standard_gamma(0.5 * np.maximum(m - 1, 0)))
    a22 = np.sqrt(2.0 * rng.standard_gamma(0.5 * np.maximum(m - 2, 0)))
    a21 = np.where(m >= 2, rng.standard_normal(m.shape), 0.0)
    # W = L A A' L' with L = sd [[1, 0], [rho, rest]] (rows y, x)
    s2 = sd * sd
    w_yy = s2 * a11 * a11
    w_xy = s2 * (rho * a11 * a11 + rest * a11 * a21)
    w_xx = s2 * (rho * rho * a11 * a11 + 2.0 * rho * rest * a11 * a21
                 + (1.0 - rho * rho) * (a21 * a21 + a22 * a22))
    used = m > 0
    mf = m.astype(float)
    sy = np.where(used, mf * y_bar, 0.0)
    sx = np.where(used, mf * x_bar, 0.0)
    syy = np.where(used, w_yy + mf * y_bar * y_bar, 0.0)
    sxx = np.where(used, w_xx + mf * x_bar * x_bar, 0.0)
    sxy = np.where(used, w_xy + mf * x_bar * y_bar, 0.0)
    return sy, syy, sx, sxx, sxy


def _arm_totals(job: _Job, rng: np.random.Generator, cum: np.ndarray, p: dict,
                tick: Callable[[float], None] | None = None) -> dict:
    return draw_totals(job.data_kind, rng, cum, p, tick, metric_kind=job.kind)


def draw_totals(kind: str, rng: np.random.Generator, cum: np.ndarray, p: dict,
                tick: Callable[[float], None] | None = None, *,
                metric_kind: str | None = None) -> dict:
    """Cumulative totals of one arm (replicates x looks) with cumulative units ``cum``,
    drawn increment by increment from the data model ``kind`` with parameters ``p``
    (see the module docstring); ``metric_kind``, the kind of metric the totals are for,
    picks the totals a data model gives (counts as a robust count metric's per-unit
    sums or as a rate's events over exposure; pre-period data with or without the
    covariate)."""
    m = np.ascontiguousarray(np.broadcast_to(_increments(cum), cum.shape))
    if kind == "binary":
        return {"n": cum, "successes": np.cumsum(rng.binomial(m, p["p"]), axis=1)}
    if kind == "counts" and metric_kind == "count":
        ev, ev2 = _unit_sums(rng, m, _count_draw(p), tick)
        return {"n": cum, "events": np.cumsum(ev, axis=1),
                "events_sq": np.cumsum(ev2, axis=1)}
    if kind == "ratio":
        sums = _unit_sums(rng, m, _ratio_draw(p), tick)
        names = ("numerator", "denominator", "numerator_sq", "denominator_sq", "cross")
        return {"n": cum, **{f: np.cumsum(v, axis=1) for f, v in zip(names, sums,
                                                                     strict=True)}}
    if kind == "pre_period":
        pre = _pre_period_sums(rng, m, p)
        fields = ("sum", "sum_sq", "covariate", "covariate_sq", "cross")
        out = {"n": cum, **{f: np.cumsum(v, axis=1) for f, v in zip(fields, pre,
                                                                    strict=True)}}
        if metric_kind == "continuous":
            return {f: out[f] for f in ("n", "sum", "sum_sq")}
        return out
    if kind == "counts":
        lam = p["rate"] * m
        if p["dispersion"] is None:
            events = rng.poisson(lam)
        else:
            shape = np.where(m > 0, m * p["dispersion"], 1.0)
            events = rng.negative_binomial(shape, p["dispersion"] / (p["dispersion"] +
                                                                     p["rate"]))
            events = np.where(m > 0, events, 0)
        return {"exposure": cum, "events": np.cumsum(events, axis=1)}
    if kind == "normal":
        mu, sd = p["mean"], p["sd"]
        mean = mu + sd * rng.standard_normal(m.shape) / np.sqrt(np.maximum(m, 1))
        ss = (sd * sd) * 2.0 * rng.standard_gamma(0.5 * np.maximum(m - 1, 0))
        s1 = m * mean
        s2 = ss + m * mean * mean
    else:
        s1, s2 = _lognormal_sums(rng, m, p, tick)
    return {"n": cum, "sum": np.cumsum(s1, axis=1), "sum_sq": np.cumsum(s2, axis=1)}


def _draw_chunk(job: _Job, index: int, n: int,
                report: Callable[[float], None] | None = None) -> tuple:
    """The random part of a chunk: per-arm counts, totals and the looks that happen;
    ``report(share)`` of the chunk's work as the draws go (up to 0.45)."""
    rng = _rng(job, index)
    n_c, n_t, end = _draw_counts(job, rng, n)
    tick_c = tick_t = None
    if report is not None:
        report(0.05)
        tick_c = lambda f: report(0.05 + 0.2 * f)          # noqa: E731
        tick_t = lambda f: report(0.25 + 0.2 * f)          # noqa: E731
    ctrl = _arm_totals(job, rng, n_c, job.control, tick_c)
    if report is not None:
        report(0.25)
    trt = _arm_totals(job, rng, n_t, job.treatment, tick_t)
    if report is not None:
        report(0.45)
    return n_c, n_t, end, ctrl, trt


# ---------------------------------------------------------------------------
# Deciding one chunk
# ---------------------------------------------------------------------------


@dataclass
class _Chunk:
    stops: np.ndarray
    naive_stops: np.ndarray
    total: int
    total_sq: int
    naive_total: int
    frac_sum: np.ndarray
    frac_count: np.ndarray
    calls: int
    computed: int
    paths: dict | None = None


def _valid_looks(job: _Job, n_c: np.ndarray, n_t: np.ndarray, end: np.ndarray
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Which looks are analysed, the fractions, and the number of looks per replicate."""
    k = job.times.size
    need = _MIN_UNITS[job.kind]
    tot = n_c + n_t
    grew = np.diff(tot, axis=1, prepend=0) > 0
    valid = (n_c >= need) & (n_t >= need) & grew
    frac = (n_c.astype(float) + n_t.astype(float)) / float(job.n_max)
    look = np.arange(k)[None, :]
    valid &= look < end[:, None]
    if not job.mixture:
        reached = valid & (frac >= 1.0)
        first = np.where(reached.any(axis=1), np.argmax(reached, axis=1) + 1, k)
        end = np.minimum(end, first)
        valid &= look < end[:, None]
    # the last analysed look closes the experiment
    last = np.where(valid.any(axis=1), k - 1 - np.argmax(valid[:, ::-1], axis=1), end - 1)
    end = np.minimum(end, last + 1)
    return valid, frac, end


def _safe_totals(job: _Job, totals: dict, valid: np.ndarray) -> dict:
    """Replace totals of looks that are not analysed by harmless valid ones."""
    if valid.all():
        return totals
    if job.kind == "binary":
        dummy = {"n": 1.0, "successes": 0.0}
    elif job.kind == "continuous":
        dummy = {"n": 2.0, "sum": 0.0, "sum_sq": 1.0}
    elif job.kind == "count":
        dummy = {"n": 2.0, "events": 1.0, "events_sq": 1.0}
    elif job.kind == "ratio":
        dummy = {"n": 2.0, "numerator": 1.0, "denominator": 2.0, "numerator_sq": 1.0,
                 "denominator_sq": 2.0, "cross": 1.0}
    elif job.kind == "adjusted":
        dummy = {"n": 2.0, "sum": 0.0, "sum_sq": 1.0, "covariate": 0.0, "covariate_sq": 1.0,
                 "cross": 0.0}
    else:
        dummy = {"exposure": 1.0, "events": 0.0}
    return {f: np.where(valid, v, dummy[f]) for f, v in totals.items()}


def _never(sides: int) -> float:
    # a futility boundary that never stops: z < -inf (one-sided), |z| < 0 (two-sided)
    return 0.0 if sides == 2 else -np.inf


def _pattern_keys(valid: np.ndarray, frac: np.ndarray, end: np.ndarray) -> np.ndarray:
    """One row per replicate naming its boundary computation: the fractions of its
    analysed looks, -1 at looks not analysed, -2 after its last look."""
    look = np.arange(frac.shape[1])[None, :]
    key = np.where(valid, frac, -1.0)
    return np.where(look < end[:, None], key, -2.0)


def _distinct_rows(key: np.ndarray) -> int:
    """Number of distinct rows (exact): rows are hashed, sorted by hash, and rows with
    equal hashes compared in full; a collision falls back to ``np.unique``."""
    n = key.shape[0]
    if n <= 1:
        return n
    bits = np.ascontiguousarray(key, dtype=np.float64).view(np.uint64)
    h = np.zeros(n, dtype=np.uint64)
    mult = np.uint64(0x9E3779B97F4A7C15)
    with np.errstate(over="ignore"):
        for j in range(bits.shape[1]):
            h = (h ^ bits[:, j]) * mult
            h ^= h >> np.uint64(29)
    order = np.argsort(h, kind="stable")
    same_hash = h[order[1:]] == h[order[:-1]]
    if not same_hash.any():
        return n
    sorted_rows = key[order]
    same_row = np.all(sorted_rows[1:] == sorted_rows[:-1], axis=1)
    if np.any(same_hash & ~same_row):
        return int(np.unique(key, axis=0).shape[0])
    return int(n - np.count_nonzero(same_row))


def _boundaries(job: _Job, valid: np.ndarray, frac: np.ndarray, end: np.ndarray,
                tick: Callable[[int, int], None] | None = None
                ) -> tuple[np.ndarray, np.ndarray | None, int]:
    """Per-replicate boundaries from the rule, once per distinct fraction pattern;
    ``tick(done, patterns)`` after each computation."""
    n, k = frac.shape
    plan = job.plan
    rule = GroupSequentialRule(plan)
    key = _pattern_keys(valid, frac, end)
    if job.fixed_counts is not None:
        uniq, inv = key[:1], np.zeros(n, dtype=np.intp)
    else:
        uniq, inv = np.unique(key, axis=0, return_inverse=True)
        inv = inv.ravel()
    has_fut = plan.futility_z is not None
    a_u = np.full(uniq.shape, np.inf)
    b_u = np.full(uniq.shape, _never(job.sides)) if has_fut else None
    for i, row in enumerate(uniq):
        v = row >= 0
        if v.any():
            a, b = rule.boundaries(row[v], final=True)
            a_u[i, v] = a
            if b_u is not None and b is not None:
                b_u[i, v] = b
        if tick is not None:
            tick(i + 1, len(uniq))
    return a_u[inv], (None if b_u is None else b_u[inv]), len(uniq)


def _screened(job: _Job, z: np.ndarray, valid: np.ndarray, frac: np.ndarray,
              end: np.ndarray, tick: Callable[[int, int], None] | None = None
              ) -> tuple[np.ndarray, np.ndarray, int]:
    """Decisions through the exact screen: replicates it settles need no boundaries,
    the rest get theirs from the rule (see :mod:`seqtest.simulation.screen`)."""
    rule = GroupSequentialRule(job.plan)
    k = frac.shape[1]
    a_tail = job.alpha / job.sides
    # the rule's own spending (a classical plan's: its design's cumulative alpha)
    cum = rule.cumulative_alpha(frac)
    look = np.arange(k)[None, :]
    seen = valid & (look < end[:, None])
    last = np.where(seen.any(axis=1), k - 1 - np.argmax(seen[:, ::-1], axis=1), -1)
    cum = np.where(look == last[:, None], a_tail, cum)    # the final look spends the rest
    stat = np.abs(z) if job.sides == 2 else z
    res = settle(stat, seen, frac, cum, end, job.sides)
    stop, code = res.stop.copy(), res.code.copy()
    rest = np.flatnonzero(~res.settled)
    computed = 0
    if rest.size:
        a, b, computed = _boundaries(job, valid[rest], frac[rest], end[rest], tick)
        s_, c_ = _decide_groups(z[rest], a, b, end[rest], job.sides, job.obey)
        stop[rest] = s_
        code[rest] = c_
    return stop, code, computed


def _decide_groups(z: np.ndarray, a: np.ndarray, b: np.ndarray | None, end: np.ndarray,
                   sides: int, obey: bool) -> tuple[np.ndarray, np.ndarray]:
    """The stopping rule (:class:`~seqtest.core.region.Region` and
    :func:`~seqtest.core.region.first_stop`) on each group of replicates with the same
    number of looks."""
    n = z.shape[0]
    stop = np.empty(n, dtype=np.int64)
    out = np.empty(n, dtype=np.int8)
    for e in np.unique(end):
        rows = np.flatnonzero(end == e)
        e = int(e)
        region = Region.of_plan(sides, a[rows, :e], None if b is None else b[rows, :e])
        s, o = first_stop(region.classify(z[rows, :e]), final_last=True, obey_futility=obey)
        stop[rows] = s
        out[rows] = o
    return stop, out


def _tally(k: int, stop: np.ndarray, code: np.ndarray, up: np.ndarray) -> np.ndarray:
    """Stops per look and outcome (columns :data:`OUTCOMES`) from decision codes."""
    col = np.where(code == Decision.STOP_EFFICACY.code, np.where(up, 0, 1),
                   np.where(code == Decision.STOP_FUTILITY.code, 2, 3))
    out = np.zeros((k, 4), dtype=np.int64)
    np.add.at(out, (stop, col), 1)
    return out


def _run_chunk(job: _Job, index: int, n: int,
               report: Callable[[float], None] | None = None) -> _Chunk:
    """Simulate chunk ``index`` of ``n`` replicates; ``report(share)`` tells how far it
    got (never touching the random numbers)."""
    n_c, n_t, end, ctrl, trt = _draw_chunk(job, index, n, report)
    tick = None
    if report is not None:
        tick = lambda i, m: report(0.5 + 0.45 * i / max(m, 1))   # noqa: E731
    k = job.times.size
    valid, frac, end = _valid_looks(job, n_c, n_t, end)
    eff = metrics.effect(job.kind, _safe_totals(job, ctrl, valid),
                         _safe_totals(job, trt, valid), scale=job.scale, null=job.null)
    # decisions on sign * z: the better side is the upper one (rules.orientation)
    z = np.where(valid, job.sign * eff.z, 0.0)
    rows = np.arange(n)
    last = end - 1
    calls = computed = 0
    if job.mixture:
        se = np.where(valid, eff.se, np.inf)
        est = np.where(valid & np.isfinite(se), eff.estimate, 0.0)
        size = np.maximum(n_c, n_t)
        null = job.null
        if job.sign < 0:
            # the effect seen from the control's side (rules.always_valid_effect)
            if job.scale == "relative":
                with np.errstate(divide="ignore", invalid="ignore"):
                    se = np.where(np.isfinite(se), se / np.square(1.0 + est), np.inf)
            est = flip(est, job.scale)
            null = flip(null, job.scale)
        res = always_valid(est, se, job.plan, n=size, null=null)
        first = np.asarray(res.first_rejection)
        sidx = np.asarray(res.stop_index)
        stop = np.where((sidx >= 0) & (sidx < end), sidx, last)
        code = np.where((first >= 0) & (first == stop), Decision.STOP_EFFICACY.code,
                        Decision.COMPLETE.code).astype(np.int8)
        up = np.asarray(res.direction_sign) > 0
    elif job.screen:
        stop, code, computed = _screened(job, z, valid, frac, end, tick)
        calls = _distinct_rows(_pattern_keys(valid, frac, end))
        up = z[rows, stop] > 0
    else:
        a, b, calls = _boundaries(job, valid, frac, end, tick)
        computed = calls
        stop, code = _decide_groups(z, a, b, end, job.sides, job.obey)
        up = z[rows, stop] > 0
    stops = _tally(k, stop, code, up)
    a_naive = np.where(valid, job.naive_z, np.inf)
    n_stop, n_code = _decide_groups(z, a_naive, None, end, job.sides, False)
    naive_stops = _tally(k, n_stop, n_code, z[rows, n_stop] > 0)
    total = (n_c[rows, stop] + n_t[rows, stop]).astype(np.int64)
    naive_total = (n_c[rows, n_stop] + n_t[rows, n_stop]).astype(np.int64)
    seen = valid & (np.arange(k)[None, :] < end[:, None])
    paths = None
    if job.keep_paths:
        paths = {"n_control": np.array(n_c), "n_treatment": np.array(n_t),
                 "control": {f: np.array(v) for f, v in ctrl.items()},
                 "treatment": {f: np.array(v) for f, v in trt.items()},
                 "z": z, "valid": valid, "fraction": frac, "looks": end,
                 "stop": stop, "outcome": code, "naive_stop": n_stop, "naive_outcome": n_code}
    return _Chunk(stops=stops, naive_stops=naive_stops, total=int(total.sum()),
                  total_sq=int((total * total).sum()), naive_total=int(naive_total.sum()),
                  frac_sum=np.where(seen, frac, 0.0).sum(axis=0),
                  frac_count=seen.sum(axis=0), calls=calls, computed=computed,
                  paths=paths)


# ---------------------------------------------------------------------------
# The public entry point
# ---------------------------------------------------------------------------


def _chunk_size(job_k: int, chunk_size: int) -> int:
    return int(min(chunk_size, max(500, _MAX_CELLS // max(job_k, 1))))


def _label(plan: Any) -> str:
    side = "two-sided" if plan.sides == 2 else "one-sided"
    if not isinstance(plan, Plan):
        return f"mixture SPRT, {side} alpha {plan.alpha:g}, tau2 {plan.tau2:.4g}"
    text = f"{plan.looks} looks, {side} alpha {plan.alpha:g}, {plan.efficacy.label}"
    if plan.futility is not None:
        text += (f", futility {plan.futility.label} "
                 f"({'binding' if plan.binding else 'non-binding'})")
    return text


def _at_null(plan: Any, sc: Scenario, job: _Job) -> bool:
    """The true effect is the null the plan tests (0, or the plan's margin)."""
    if job.null == 0:
        return sc.is_null
    if sc.effect_type == "mde_multiple":
        return sc.effect == 0.0
    _, _, m_t, m_c = _arms(plan, sc)
    true = (m_t / m_c - 1.0) if job.scale == "relative" else (m_t - m_c)
    return math.isclose(true, job.null, rel_tol=1e-9, abs_tol=1e-12)


def _design_rate(plan: Any, sc: Scenario, job: _Job) -> float | None:
    if _at_null(plan, sc, job):
        return float(plan.alpha)
    if sc.effect_type != "mde_multiple" or job.mixture:
        return None
    if sc.traffic.mode != "fixed" or sc.traffic.extra_looks or not job.obey and \
            plan.futility_z is not None:
        return None
    return float(plan.characteristics(sc.effect).reject_any)


def _tails(rej_up: int, rej_down: int, reps: int, alpha: float, sides: int,
           confidence: float) -> tuple[TailRate, ...]:
    out = []
    for direction, count in (("upper", rej_up), ("lower", rej_down))[:sides]:
        lo, hi = clopper_pearson(count, reps, confidence)
        out.append(TailRate(direction, count, count / reps, lo, hi, alpha / sides))
    return tuple(out)


def _verdict(null: bool, lo: float, hi: float, alpha: float, design: float | None,
             tails: tuple[TailRate, ...] = ()) -> str:
    if null:
        leaking = [f"{t.direction} tail {t.rate:.4f} against {t.alpha:g}"
                   for t in tails if t.leaks]
        if lo > alpha:
            leaking.insert(0, f"total against {alpha:g}")
        return f"leaks alpha ({'; '.join(leaking)})" if leaking else "holds alpha"
    if design is None:
        return "power (no prediction from the plan to compare)"
    if hi < design:
        return "below the plan's power"
    if lo > design:
        return "above the plan's power"
    return "consistent with the plan's power"


def simulate(
    plan: Any,
    scenario: Scenario,
    reps: int,
    *,
    seed: int = 0,
    workers: int | None = 1,
    chunk_size: int = DEFAULT_CHUNK,
    confidence: float = 0.95,
    progress: Callable[[int, int], None] | None = None,
    executor: Executor | None = None,
    keep_paths: bool = False,
    screen: bool = True,
    client: Any = None,
) -> SimulationResult:
    """Simulate ``reps`` experiments of a scenario under a plan.

    Parameters
    ----------
    plan : Plan, MixturePlan or dict
        A group-sequential plan (:func:`seqtest.design`), a mixture plan
        (:func:`seqtest.mixture.mixture_plan`) or a plan document.
    scenario : Scenario
        From :func:`seqtest.simulation.scenarios.load_scenario` or
        :func:`seqtest.simulation.scenarios.scenario_from_dict`.
    reps : int
        Number of simulated experiments, >= 1.
    seed : int
        Seed (>= 0) of the whole run.
    workers : int or None
        Local processes to use; ``None`` or 0: all cores. Results do not depend on it.
    chunk_size : int
        Replicates per chunk (capped so a chunk holds at most 1e6 replicate-looks);
        part of what makes a run reproducible.
    confidence : float
        Level of the Clopper-Pearson intervals.
    progress : callable, optional
        Called as ``progress(done, total)`` (replicates) after each chunk and, within
        a chunk, at most every quarter second of its running time (draws, boundary
        computations); how often it is called never changes the result.
    executor : concurrent.futures.Executor, optional
        Run the chunks on this executor (overrides `workers`; progress per chunk).
    client : distributed.Client, optional
        Run the chunks as tasks on this Dask cluster (overrides `workers` and
        `executor`; see :func:`seqtest.simulation.runner.dask_client`). The result is
        the same, bit for bit.
    keep_paths : bool
        Keep the per-replicate arrays in :attr:`SimulationResult.paths` (for
        checks on small runs).
    screen : bool
        Settle replicates whose decision is certain without their own boundaries
        (random traffic, futility absent or ignored; see
        :mod:`seqtest.simulation.screen`). The decisions and every number except
        :attr:`SimulationResult.boundaries_computed` are the same either way; False
        computes every boundary (for checks).

    Returns
    -------
    SimulationResult

    Raises
    ------
    ValueError
        For bad arguments or a scenario that does not fit the plan (naming the
        field).

    Notes
    -----
    See the module docstring for how data and traffic are drawn and how the
    decision code is called. The rejection rate has the exact binomial
    (Clopper-Pearson) interval; the expected total its standard error
    ``sqrt(var / reps)`` with the sample variance of the totals.
    """
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int)
                                or workers < 0):
        raise ValueError(f"workers: got {workers!r}; allowed is a whole number >= 0 "
                         "(0 or None: all cores)")
    prep = prepare(plan, scenario, reps, seed=seed, chunk_size=chunk_size,
                   confidence=confidence, keep_paths=keep_paths, screen=screen)
    n_workers = workers if workers else (os.cpu_count() or 1)
    runner = Runner(workers=n_workers, executor=executor, client=client)
    total = prep.reps
    moved = None if progress is None else (lambda _b, done: progress(done, total))
    chunks = runner.run([prep.batch], progress=moved)[0]
    assert chunks is not None
    return prep.result(chunks)


@dataclass(frozen=True)
class Prepared:
    """A checked simulation ready to run: its chunks (:attr:`batch`, for
    :class:`~seqtest.simulation.runner.Runner`) and how their results combine
    (:meth:`result`). Several prepared simulations can share one runner, so the chunks
    of many (a validation grid) keep every worker busy."""

    plan: Any
    scenario: Scenario
    job: _Job
    reps: int
    confidence: float

    @property
    def batch(self) -> Batch:
        chunk = self.job.chunk
        return Batch(_run_chunk, self.job, tuple(min(chunk, self.reps - s)
                                                 for s in range(0, self.reps, chunk)))

    def result(self, chunks: list) -> SimulationResult:
        """The result from the chunks' results in chunk order."""
        return _combine(self.plan, self.scenario, self.job, self.reps, self.confidence,
                        chunks)


def prepare(plan: Any, scenario: Scenario, reps: int, *, seed: int = 0,
            chunk_size: int = DEFAULT_CHUNK, confidence: float = 0.95,
            keep_paths: bool = False, screen: bool = True) -> Prepared:
    """Check the arguments of :func:`simulate` and set the run up without running it
    (the same arguments; raises the same errors)."""
    if isinstance(reps, bool) or not isinstance(reps, (int, np.integer)) or reps < 1:
        raise ValueError(f"reps: got {reps!r}; allowed is a whole number >= 1")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ValueError(f"seed: got {seed!r}; allowed is a whole number >= 0")
    if isinstance(chunk_size, bool) or not isinstance(chunk_size, (int, np.integer)) \
            or chunk_size < 1:
        raise ValueError(f"chunk_size: got {chunk_size!r}; allowed is a whole number >= 1")
    if not 0 < float(confidence) < 1:
        raise ValueError(f"confidence: got {confidence!r}; allowed is a level in (0, 1)")
    if isinstance(plan, dict):
        plan = plan_from_dict(plan)
    job0 = _job(plan, scenario, int(seed), 0, keep_paths, bool(screen))
    chunk = _chunk_size(job0.times.size, int(chunk_size))
    return Prepared(plan, scenario, replace(job0, chunk=chunk), int(reps), float(confidence))


def _combine(plan: Any, sc: Scenario, job: _Job, reps: int, confidence: float,
             chunks: list[_Chunk]) -> SimulationResult:
    k = job.times.size
    stops = np.zeros((k, 4), dtype=np.int64)
    naive = np.zeros((k, 4), dtype=np.int64)
    frac_sum = np.zeros(k)
    frac_count = np.zeros(k, dtype=np.int64)
    total = total_sq = naive_total = calls = computed = 0
    for c in chunks:                      # in chunk order: bit-for-bit reproducible
        stops += c.stops
        naive += c.naive_stops
        frac_sum += c.frac_sum
        frac_count += c.frac_count
        total += c.total
        total_sq += c.total_sq
        naive_total += c.naive_total
        calls += c.calls
        computed += c.computed
    rej_up, rej_down = int(stops[:, 0].sum()), int(stops[:, 1].sum())
    rej = rej_up + rej_down
    lo, hi = clopper_pearson(rej, reps, confidence)
    tails = _tails(rej_up, rej_down, reps, job.alpha, job.sides, confidence)
    mean_total = total / reps
    var = max(0.0, (total_sq - total * total / reps) / max(reps - 1, 1))
    at_null = _at_null(plan, sc, job)
    design = _design_rate(plan, sc, job)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_frac = np.where(frac_count > 0, frac_sum / np.maximum(frac_count, 1), np.nan)
    ctrl, trt, m_t, m_c = _arms(plan, sc)
    true = (m_t / m_c - 1.0) if job.scale == "relative" else (m_t - m_c)
    nv = None
    if sc.naive:
        n_rej = int(naive[:, :2].sum())
        nlo, nhi = clopper_pearson(n_rej, reps, confidence)
        nv = NaiveSummary(z=job.naive_z, rejections=n_rej, rate=n_rej / reps, ci_lower=nlo,
                          ci_upper=nhi, expected_total=naive_total / reps, stops=naive)
    paths = None
    if job.keep_paths:
        paths = _join_paths([c.paths for c in chunks])
    return SimulationResult(
        scenario=sc.name, description=sc.description,
        plan_kind="mixture" if job.mixture else "group_sequential", plan_label=_label(plan),
        alpha=job.alpha, sides=job.sides, data_kind=sc.data_kind, analysis_kind=job.kind,
        scale=job.scale, traffic=sc.traffic.mode, futility="obey" if job.obey else "ignore",
        reps=reps, seed=job.seed, chunk_size=job.chunk, null=at_null,
        true_effect=float(true), confidence=confidence, rejections=rej,
        rejections_upper=rej_up, rejections_lower=rej_down, rate=rej / reps, ci_lower=lo,
        ci_upper=hi, tails=tails, design_rate=design,
        verdict=_verdict(at_null, lo, hi, job.alpha, design, tails),
        look_times=job.times.copy(),
        mean_fraction=mean_frac, stops=stops, expected_total=mean_total,
        expected_total_se=math.sqrt(var / reps), max_total=float(job.n_max), naive=nv,
        boundary_calls=calls, boundaries_computed=computed, paths=paths)


def _join_paths(parts: list[dict | None]) -> dict:
    out: dict = {}
    first = parts[0]
    assert first is not None and all(p is not None for p in parts)
    parts_: list[dict] = [p for p in parts if p is not None]
    for key, val in first.items():
        if isinstance(val, dict):
            out[key] = {f: np.concatenate([p[key][f] for p in parts_]) for f in val}
        else:
            out[key] = np.concatenate([p[key] for p in parts_])
    return out


# ---------------------------------------------------------------------------
# Figure
# ---------------------------------------------------------------------------


def plot_result(result: SimulationResult, path: Any) -> Any:
    """Draw a result to a PNG file (see :func:`seqtest.plotting.plot_simulation`);
    returns the path written."""
    from pathlib import Path

    from seqtest.plotting import plot_simulation
    out = Path(path)
    plot_simulation(result, out)
    return out
