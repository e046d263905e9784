"""The continuation region of a group-sequential test, and the stopping rule.

At look ``k`` a test with efficacy boundary ``a_k`` and (optional) futility boundary
``b_k`` continues while ``Z_k`` stays inside its continuation region:

- one-sided: ``b_k < Z_k < a_k`` (no futility: ``b_k = -inf``); ``Z_k >= a_k`` stops
  for efficacy, ``Z_k < b_k`` for futility;
- two-sided (symmetric): ``b_k < |Z_k| < a_k`` (no futility: ``b_k = 0``); ``|Z_k| >=
  a_k`` stops for efficacy in the direction of ``Z_k``, ``|Z_k| < b_k`` for futility.

At the final look the boundaries meet (``b_K = a_K``): not crossing efficacy there
completes the experiment without significance. :class:`Region` is this rule as a
value; design, monitoring, inference and the simulator all take it from here, so it is
written once. The z values exactly on a boundary count as crossing efficacy and as
continuing at futility (measure zero either way).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from seqtest.core.recursion import (
    DEFAULT_R,
    Crossing,
    continuation_intervals,
    crossing_probabilities,
)
from seqtest.core.vocabulary import Decision

__all__ = ["Region", "first_stop"]

_CONTINUE = np.int8(Decision.CONTINUE.code)
_EFFICACY = np.int8(Decision.STOP_EFFICACY.code)
_FUTILITY = np.int8(Decision.STOP_FUTILITY.code)
_COMPLETE = np.int8(Decision.COMPLETE.code)


@dataclass(frozen=True)
class Region:
    """Exits of a group-sequential test at each look.

    Attributes
    ----------
    upper : ndarray
        Stop for efficacy (upward) when ``Z >= upper``; ``inf``: never.
    lower : ndarray
        Stop when ``Z <= lower`` (``-inf``: never): for efficacy downward when
        `lower_is_efficacy`, else for futility.
    inner : ndarray or None
        Half-width of an inner futility band: stop when ``|Z| < inner``.
    lower_is_efficacy : bool
        True for a symmetric two-sided test.

    Arrays have the looks on their last axis and may carry leading axes (one region
    per simulated path); :meth:`intervals` and :meth:`crossing` need one-dimensional
    arrays.
    """

    upper: np.ndarray
    lower: np.ndarray
    inner: np.ndarray | None
    lower_is_efficacy: bool

    @classmethod
    def of_plan(cls, sides: int, efficacy: Any, futility: Any = None) -> Region:
        """The region of a plan with efficacy ``a`` and futility ``b`` boundaries.

        ``futility`` is ``None`` (no futility boundary, or one that is ignored: a
        non-binding boundary in the null computations) or per-look values: the lower
        boundary of a one-sided test, the inner half-width of a two-sided one (values
        above ``a`` are cut to ``a``, as at the final look where the two meet).
        """
        a = np.asarray(efficacy, float)
        if sides == 2:
            inner = None if futility is None else np.clip(np.asarray(futility, float), 0.0, a)
            return cls(a, -a, inner, True)
        if sides != 1:
            raise ValueError(f"sides: got {sides!r}; allowed are 1 and 2")
        lower = (np.full(a.shape, -np.inf) if futility is None
                 else np.minimum(np.asarray(futility, float), a))
        return cls(a, lower, None, False)

    @property
    def looks(self) -> int:
        return int(self.upper.shape[-1])

    def with_last(self, *, upper: float | None = None, lower: float | None = None,
                  inner: float | None = None) -> Region:
        """The same region with the last look's exits replaced (stage-wise ordering)."""
        up, lo = self.upper.copy(), self.lower.copy()
        inn = None if self.inner is None else self.inner.copy()
        if upper is not None:
            up[..., -1] = upper
        if lower is not None:
            lo[..., -1] = lower
        if inner is not None and inn is not None:
            inn[..., -1] = inner
        return Region(up, lo, inn, self.lower_is_efficacy)

    def head(self, k: int) -> Region:
        """The first ``k`` looks."""
        return Region(self.upper[..., :k], self.lower[..., :k],
                      None if self.inner is None else self.inner[..., :k],
                      self.lower_is_efficacy)

    # -- the recursion ----------------------------------------------------------------
    def intervals(self, k: int) -> list[tuple[float, float]]:
        """The z values that continue past look ``k`` (0-based), as intervals."""
        w = 0.0 if self.inner is None else float(self.inner[k])
        return continuation_intervals(float(self.lower[k]), float(self.upper[k]), -w, w)

    def crossing(self, info: Any, drift: float = 0.0, r: int = DEFAULT_R) -> Crossing:
        """First-exit probabilities through each exit (see
        :func:`seqtest.core.recursion.crossing_probabilities`)."""
        kw: dict[str, Any] = {}
        if self.inner is not None:
            kw = {"inner_lower": -self.inner, "inner_upper": self.inner}
        return crossing_probabilities(self.upper, self.lower, info, drift, r=r, **kw)

    def efficacy_probability(self, info: Any, drift: float = 0.0, r: int = DEFAULT_R
                             ) -> np.ndarray:
        """Per-look probability of stopping for efficacy (either direction)."""
        cr = self.crossing(info, drift, r)
        return cr.upper + cr.lower if self.lower_is_efficacy else cr.upper

    # -- the stopping rule ------------------------------------------------------------
    def classify(self, z: Any, *, degenerate: Any = None) -> np.ndarray:
        """Decision code of each look taken on its own (see
        :class:`~seqtest.core.vocabulary.Decision`): efficacy where ``z`` crosses an
        efficacy exit, futility where it falls in a futility exit, else continue.
        ``degenerate`` looks (no variance estimate) never stop for efficacy.

        Vectorised: ``z`` broadcasts against the region's arrays.
        """
        zz = np.asarray(z, float)
        up = np.broadcast_to(self.upper, np.broadcast_shapes(zz.shape, self.upper.shape))
        lo = np.broadcast_to(self.lower, up.shape)
        zz = np.broadcast_to(zz, up.shape)
        eff = zz >= up
        if self.lower_is_efficacy:
            eff = eff | (zz <= lo)
            fut = np.zeros(up.shape, bool)
        else:
            fut = zz < lo
        if self.inner is not None:
            fut = fut | (np.abs(zz) < np.broadcast_to(self.inner, up.shape))
        if degenerate is not None:
            eff = eff & ~np.broadcast_to(np.asarray(degenerate, bool), up.shape)
        fut = fut & ~eff
        return np.where(eff, _EFFICACY, np.where(fut, _FUTILITY, _CONTINUE)).astype(np.int8)


def first_stop(codes: np.ndarray, *, final_last: bool = True, obey_futility: bool = True
               ) -> tuple[np.ndarray, np.ndarray]:
    """Where and how each path stops, from its per-look codes (:meth:`Region.classify`).

    Parameters
    ----------
    codes : ndarray of int8, shape (..., K)
    final_last : bool
        The last look is final: a path that reaches it stops there, completing without
        significance unless it crosses efficacy (a futility code there is completion:
        the boundaries meet at the final look).
    obey_futility : bool
        Stop paths at futility codes (``False`` shows what happens when a non-binding
        futility boundary is ignored).

    Returns
    -------
    stop_look : ndarray of int
        0-based look at which each path stops; ``-1`` for paths still running (only
        when ``final_last`` is false).
    decision : ndarray of int8
        The decision code at the stop (continue for paths still running).
    """
    c = np.asarray(codes)
    eff = c == _EFFICACY
    fut = (c == _FUTILITY) if obey_futility else np.zeros(c.shape, bool)
    if final_last:
        fut[..., -1] = False
    stop = eff | fut
    if final_last:
        stop[..., -1] = True
    any_stop = stop.any(axis=-1)
    first = np.where(any_stop, np.argmax(stop, axis=-1), -1)
    idx = np.maximum(first, 0)[..., None]
    e_at = np.take_along_axis(eff, idx, axis=-1)[..., 0]
    f_at = np.take_along_axis(fut, idx, axis=-1)[..., 0]
    out = np.where(~any_stop, _CONTINUE,
                   np.where(e_at, _EFFICACY, np.where(f_at, _FUTILITY, _COMPLETE)))
    return first, out.astype(np.int8)
