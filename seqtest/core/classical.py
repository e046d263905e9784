"""Classical fixed-shape efficacy boundaries.

A classical boundary has a shape fixed in advance and one constant solved so the
overall type I error is exactly alpha (see :func:`seqtest.core.boundaries.constant_bounds`):

- Pocock (1977): the same z boundary at every look.
- O'Brien and Fleming (1979): ``C sqrt(K / k)``, i.e. ``C / sqrt(t_k)`` with
  ``t_k = I_k / I_K``.
- Wang and Tsiatis (1987): ``C t_k^(Delta - 1/2)``; Delta = 0 is O'Brien-Fleming,
  Delta = 0.5 is Pocock.
- Haybittle (1971) and Peto et al. (1976): a fixed interim boundary (3 by
  convention) and a final boundary solved so the level is exactly alpha (the
  final boundary is then a little above the fixed-sample one).

References
----------
.. [1] Pocock, S. J. (1977). Biometrika 64, 191-199.
.. [2] O'Brien, P. C. and Fleming, T. R. (1979). Biometrics 35, 549-556.
.. [3] Wang, S. K. and Tsiatis, A. A. (1987). Biometrics 43, 193-199.
.. [4] Haybittle, J. L. (1971). British Journal of Radiology 44, 793-797.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from seqtest.core import checks

__all__ = ["ClassicalBoundary", "pocock", "obrien_fleming", "wang_tsiatis",
           "haybittle_peto", "from_dict"]


@dataclass(frozen=True)
class ClassicalBoundary:
    """A classical boundary shape; see the module docstring.

    Attributes
    ----------
    family : str
        ``"wang_tsiatis"`` (Pocock and O'Brien-Fleming are its members) or
        ``"haybittle_peto"``.
    params : dict
        ``delta`` for Wang-Tsiatis, ``interim_z`` for Haybittle-Peto.
    """

    family: str
    params: dict = field(default_factory=dict)

    def shape(self, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Shape per look and the mask of looks whose boundary is fixed, not scaled."""
        t = np.asarray(t, float)
        t = t / t[-1]
        if self.family == "wang_tsiatis":
            return t ** (float(self.params["delta"]) - 0.5), np.zeros(t.size, bool)
        fixed = np.ones(t.size, bool)
        fixed[-1] = False
        s = np.full(t.size, float(self.params["interim_z"]))
        s[-1] = 1.0
        return s, fixed

    @property
    def label(self) -> str:
        if self.family == "haybittle_peto":
            return f"Haybittle-Peto (interim z = {self.params['interim_z']:g})"
        d = float(self.params["delta"])
        if d == 0.5:
            return "Pocock constant boundary"
        if d == 0.0:
            return "O'Brien-Fleming boundary"
        return f"Wang-Tsiatis boundary (Delta={d:g})"

    def to_dict(self) -> dict:
        return {"type": "classical", "family": self.family, **self.params}


def wang_tsiatis(delta: float) -> ClassicalBoundary:
    """Wang-Tsiatis family ``C t^(Delta - 1/2)``, ``Delta`` in [-0.5, 1]."""
    d = checks.number("delta", delta, lo=-0.5, hi=1.0)
    return ClassicalBoundary("wang_tsiatis", {"delta": d})


def pocock() -> ClassicalBoundary:
    """Pocock's constant boundary (Wang-Tsiatis with Delta = 0.5)."""
    return wang_tsiatis(0.5)


def obrien_fleming() -> ClassicalBoundary:
    """O'Brien-Fleming's boundary ``C / sqrt(t)`` (Wang-Tsiatis with Delta = 0)."""
    return wang_tsiatis(0.0)


def haybittle_peto(interim_z: float = 3.0) -> ClassicalBoundary:
    """Haybittle-Peto: fixed interim boundary ``interim_z`` (3 by convention)."""
    z = checks.number("interim_z", interim_z, lo=2.0, hi=8.0)
    return ClassicalBoundary("haybittle_peto", {"interim_z": z})


def from_dict(d: dict) -> ClassicalBoundary:
    """Read back :meth:`ClassicalBoundary.to_dict`."""
    if d.get("family") == "wang_tsiatis":
        return wang_tsiatis(d["delta"])
    if d.get("family") == "haybittle_peto":
        return haybittle_peto(d["interim_z"])
    raise ValueError(f"family: got {d.get('family')!r}; unknown classical boundary")
