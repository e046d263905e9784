"""Error spending functions.

A spending function ``f`` gives the cumulative type I (or type II) error spent by
information fraction ``t``: ``f(t, alpha)`` is non-decreasing in ``t``, ``f(0) = 0``
and ``f(t) = alpha`` for ``t >= 1`` (information running over the maximum spends
nothing more). Every function here is vectorised over ``t``.

All tail probabilities are computed with survival functions, so the early looks of
an O'Brien-Fleming-type plan (where ``f`` is of order 1e-10) keep full relative
precision.

References
----------
.. [1] Lan, K. K. G. and DeMets, D. L. (1983). Discrete sequential boundaries for
       clinical trials. Biometrika 70, 659-663.
.. [2] Hwang, I. K., Shih, W. J. and DeCani, J. S. (1990). Group sequential designs
       using a family of type I error probability spending functions. Statistics in
       Medicine 9, 1439-1445.
.. [3] Kim, K. and DeMets, D. L. (1987). Design and analysis of group sequential
       tests based on the type I error spending rate function. Biometrika 74,
       149-154.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import ArrayLike
from scipy import special

from seqtest.core import checks

__all__ = [
    "SpendingFunction",
    "obrien_fleming",
    "pocock",
    "hwang_shih_decani",
    "power_family",
    "from_table",
    "from_dict",
    "by_name",
]


def _check_alpha(alpha: float) -> float:
    return checks.number("alpha", alpha, lo=0.0, hi=1.0, lo_open=True,
                         allowed="a probability in (0, 1]")


def _fractions(t: Any) -> np.ndarray:
    arr = np.asarray(t, dtype=float)
    if np.any(~np.isfinite(arr)) or np.any(arr < 0):
        raise checks.fail("t", t, "information fractions, finite and >= 0")
    return np.minimum(arr, 1.0)


@dataclass(frozen=True)
class SpendingFunction:
    """A cumulative error spending function ``f(t, alpha)``.

    Build one with :func:`obrien_fleming`, :func:`pocock`, :func:`hwang_shih_decani`,
    :func:`power_family` or :func:`from_table`; call it as ``f(t, alpha)``.

    Attributes
    ----------
    family : str
        ``"obrien_fleming"``, ``"pocock"``, ``"hwang_shih_decani"``,
        ``"power_family"`` or ``"table"``.
    params : dict
        The family's parameters (``gamma``, ``rho``, or the table).
    """

    family: str
    params: dict = field(default_factory=dict)

    def __call__(self, t: Any, alpha: float) -> np.ndarray | float:
        a = _check_alpha(alpha)
        tt = _fractions(t)
        out = self._spend(tt, a)
        out = np.where(tt <= 0.0, 0.0, np.where(tt >= 1.0, a, out))
        out = np.clip(out, 0.0, a)
        return float(out) if np.ndim(out) == 0 else out

    # -- families ---------------------------------------------------------------
    def _spend(self, t: np.ndarray, a: float) -> np.ndarray:
        with np.errstate(divide="ignore", invalid="ignore"):
            safe = np.where(t > 0, t, 1.0)
            if self.family == "obrien_fleming":
                # 2 - 2 Phi(z_{1-a/2} / sqrt(t)), through the survival function.
                z = -special.ndtri(a / 2.0)  # z_{1-a/2} as an upper quantile
                return 2.0 * special.ndtr(-z / np.sqrt(safe))
            if self.family == "pocock":
                return a * np.log1p((math.e - 1.0) * t)
            if self.family == "hwang_shih_decani":
                g = float(self.params["gamma"])
                if abs(g) < 1e-12:
                    return a * t
                return a * np.expm1(-g * t) / np.expm1(-g)
            if self.family == "power_family":
                return a * np.power(t, float(self.params["rho"]))
            if self.family == "table":
                return a * self._table_interp()(t)
        raise ValueError(f"family: got {self.family!r}; unknown spending family")

    def _table_interp(self) -> Any:
        from scipy import interpolate  # PCHIP: imported only for table spending
        x = np.concatenate([[0.0], np.asarray(self.params["fractions"], float)])
        y = np.concatenate([[0.0], np.asarray(self.params["cumulative"], float)])
        if x[-1] < 1.0:
            x = np.append(x, 1.0)
            y = np.append(y, 1.0)
        return interpolate.PchipInterpolator(x, y, extrapolate=False)

    # -- description ------------------------------------------------------------
    @property
    def label(self) -> str:
        """A short human-readable name."""
        if self.family == "obrien_fleming":
            return "O'Brien-Fleming-type spending"
        if self.family == "pocock":
            return "Pocock-type spending"
        if self.family == "hwang_shih_decani":
            return f"Hwang-Shih-DeCani spending (gamma={self.params['gamma']:g})"
        if self.family == "power_family":
            return f"power-family spending (rho={self.params['rho']:g})"
        return "table of cumulative spending"

    def to_dict(self) -> dict:
        """JSON-ready description; :func:`from_dict` reads it back."""
        return {"type": "spending", "family": self.family, **_plain(self.params)}


def _plain(params: dict) -> dict:
    return {k: (list(map(float, v)) if isinstance(v, (list, tuple, np.ndarray)) else v)
            for k, v in params.items()}


def obrien_fleming() -> SpendingFunction:
    """Lan-DeMets O'Brien-Fleming-type spending, ``f(t) = 2 - 2 Phi(z_{1-a/2} / sqrt t)``.

    References
    ----------
    .. [1] Lan and DeMets (1983), Biometrika 70, 659-663.
    """
    return SpendingFunction("obrien_fleming", {})


def pocock() -> SpendingFunction:
    """Lan-DeMets Pocock-type spending, ``f(t) = a ln(1 + (e - 1) t)``.

    References
    ----------
    .. [1] Lan and DeMets (1983), Biometrika 70, 659-663.
    """
    return SpendingFunction("pocock", {})


def hwang_shih_decani(gamma: float) -> SpendingFunction:
    """Hwang-Shih-DeCani family, ``f(t) = a (1 - e^{-gamma t}) / (1 - e^{-gamma})``.

    ``gamma = 0`` is linear spending ``a t``; ``gamma = -4`` behaves like
    O'Brien-Fleming and ``gamma = 1`` like Pocock (common practice).

    Parameters
    ----------
    gamma : float
        Shape, finite, in [-40, 40].

    References
    ----------
    .. [1] Hwang, Shih and DeCani (1990), Statistics in Medicine 9, 1439-1445.
    """
    g = _finite("gamma", gamma)
    if abs(g) > 40:
        raise ValueError(f"gamma: got {gamma!r}; allowed is a number in [-40, 40]")
    return SpendingFunction("hwang_shih_decani", {"gamma": g})


def power_family(rho: float) -> SpendingFunction:
    """Kim-DeMets power family, ``f(t) = a t^rho``.

    Parameters
    ----------
    rho : float
        Exponent, > 0 (1 is linear, 3 is close to O'Brien-Fleming, about 0.8 to Pocock).

    References
    ----------
    .. [1] Kim and DeMets (1987), Biometrika 74, 149-154.
    """
    r = _finite("rho", rho)
    if r <= 0 or r > 50:
        raise ValueError(f"rho: got {rho!r}; allowed is a number in (0, 50]")
    return SpendingFunction("power_family", {"rho": r})


def from_table(fractions: ArrayLike, cumulative: ArrayLike) -> SpendingFunction:
    """Spending from a user table, by monotone (PCHIP) interpolation.

    Parameters
    ----------
    fractions : sequence of float
        Information fractions, strictly increasing, in (0, 1].
    cumulative : sequence of float
        Cumulative share of the error spent at each fraction, non-decreasing, in
        [0, 1]; the error spent at ``t`` is ``alpha * share(t)``. If the last fraction is
        below 1, the point (1, 1) is added so the whole error is spent at the end.

    Notes
    -----
    Piecewise cubic Hermite interpolation (Fritsch and Carlson 1980) keeps the
    interpolated spending monotone between the table points.
    """
    x = np.asarray(fractions, dtype=float)
    y = np.asarray(cumulative, dtype=float)
    if x.ndim != 1 or x.size == 0 or x.shape != y.shape:
        raise ValueError(
            f"fractions, cumulative: got lengths {x.size} and {y.size}; "
            "allowed are two non-empty lists of equal length")
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
        raise checks.fail("fractions, cumulative", "a value that is not finite",
                          "finite numbers")
    if x[0] <= 0 or x[-1] > 1 or np.any(np.diff(x) <= 0):
        raise ValueError(
            f"fractions: got {x.tolist()}; allowed is strictly increasing in (0, 1]")
    if y[0] < 0 or y[-1] > 1 or np.any(np.diff(y) < 0):
        raise ValueError(
            f"cumulative: got {y.tolist()}; allowed is non-decreasing in [0, 1]")
    if x[-1] == 1.0 and y[-1] != 1.0:
        raise ValueError(
            f"cumulative: got {y[-1]} at fraction 1; the whole error (1.0) must be spent "
            "by the end")
    return SpendingFunction("table", {"fractions": x.tolist(), "cumulative": y.tolist()})


def _finite(name: str, value: Any) -> float:
    return checks.number(name, value)


_NAMES = {
    "obrien-fleming-type": obrien_fleming,
    "pocock-type": pocock,
}


def by_name(name: str, param: float | None = None) -> SpendingFunction:
    """Spending function by name: ``obrien-fleming-type``, ``pocock-type``,
    ``hwang-shih-decani`` (needs ``param`` = gamma) or ``power`` (needs ``param`` = rho).
    """
    key = str(name).strip().lower().replace("_", "-").replace(" ", "-")
    if key in _NAMES:
        return _NAMES[key]()
    if key in ("hwang-shih-decani", "hsd"):
        if param is None:
            raise ValueError("gamma: the hwang-shih-decani family needs a gamma value")
        return hwang_shih_decani(param)
    if key in ("power", "power-family", "kim-demets"):
        if param is None:
            raise ValueError("rho: the power family needs a rho value")
        return power_family(param)
    raise ValueError(
        f"spending: got {name!r}; allowed are obrien-fleming-type, pocock-type, "
        "hwang-shih-decani (with gamma), power (with rho)")


def from_dict(d: dict) -> SpendingFunction:
    """Read back :meth:`SpendingFunction.to_dict`."""
    fam = d.get("family")
    if fam == "obrien_fleming":
        return obrien_fleming()
    if fam == "pocock":
        return pocock()
    if fam == "hwang_shih_decani":
        return hwang_shih_decani(d["gamma"])
    if fam == "power_family":
        return power_family(d["rho"])
    if fam == "table":
        return from_table(d["fractions"], d["cumulative"])
    raise ValueError(f"family: got {fam!r}; unknown spending family in plan document")
