"""The memo of looks already solved (``seqtest.core.boundaries.SOLVED``).

Monitoring asks for the boundaries of every look again at each new look; the memo
keeps each look's boundary (and the recursion's state after it) under a key made of
everything it depends on, so only new looks are solved. The property checked here is
exactness: with the memo warm or cold, and without it, every number is the same, bit
for bit (a memoised deterministic computation gives the computation's own result;
common practice). The second check is that the memo is used: extending a sequence of
looks solves only the looks that are new (counted, not timed).
"""

from __future__ import annotations

import numpy as np
import pytest

import seqtest
from seqtest.core import boundaries as B
from seqtest.core.spending import SpendingFunction


@pytest.fixture(autouse=True)
def _cold_memo():
    B.SOLVED.clear()
    yield
    B.SOLVED.clear()


def _fractions(rng: np.random.Generator, k: int) -> np.ndarray:
    return np.cumsum(rng.uniform(0.05, 0.4, k)) / 1.6


@pytest.mark.parametrize("sides", [1, 2])
def test_spending_bounds_same_bits_with_and_without_memo(sides: int) -> None:
    rng = np.random.default_rng(7)
    f = SpendingFunction("obrien_fleming")
    for _ in range(12):
        t = _fractions(rng, int(rng.integers(2, 7)))
        cum = f(np.minimum(t, 1.0), 0.025)
        plain = B.spending_bounds(t, cum, sides=sides)
        # warm the memo with every prefix, then ask for the whole sequence
        for m in range(1, t.size):
            B.spending_bounds(t[:m], cum[:m], sides=sides, reuse=True)
        warm = B.spending_bounds(t, cum, sides=sides, reuse=True)
        assert np.array_equal(plain, warm)


def test_futility_bounds_same_bits_with_and_without_memo() -> None:
    rng = np.random.default_rng(11)
    eff = SpendingFunction("obrien_fleming")
    fut = SpendingFunction("pocock")
    for sides in (1, 2):
        for _ in range(6):
            t = _fractions(rng, int(rng.integers(2, 6)))
            a = B.spending_bounds(t, eff(np.minimum(t, 1.0), 0.025), sides=sides)
            plain = B.futility_bounds(t, 3.0, a, sides, 0.1, fut)
            for m in range(1, t.size):
                B.futility_bounds(t[:m], 3.0, a[:m], sides, 0.1, fut, final=False,
                                  reuse=True)
            warm = B.futility_bounds(t, 3.0, a, sides, 0.1, fut, reuse=True)
            assert np.array_equal(plain, warm)


def _looks(rng: np.random.Generator, kind: str, m: int) -> list[dict]:
    out, n = [], 0
    for _ in range(m):
        n += int(rng.integers(400, 2500))
        if kind == "binary":
            out.append({"control": {"n": n, "successes": n // 10},
                        "treatment": {"n": n, "successes": n // 10 + int(rng.integers(0, 30))}})
        else:
            out.append({"control": {"n": n, "mean": 0.0, "sd": 1.0},
                        "treatment": {"n": n, "mean": float(rng.normal(0.0, 0.03)),
                                      "sd": 1.0}})
    return out


PLANS = {
    "efficacy only": dict(looks=5, metric={"kind": "binary", "baseline": 0.1, "mde": 0.01}),
    "non-binding futility": dict(looks=4, futility="obrien-fleming-type",
                                 metric={"kind": "binary", "baseline": 0.1, "mde": 0.01}),
    "binding futility": dict(looks=3, sides=1, futility="pocock-type", binding=True,
                             metric={"kind": "continuous", "mde": 0.1, "sd": 1.0}),
}


@pytest.mark.parametrize("name", list(PLANS))
def test_analysis_same_bits_look_after_look(name: str) -> None:
    """The analysis of looks 1..m after the analyses of 1..m-1 (the memo warm, as in a
    service that analyses each new look) equals a cold analysis, field for field."""
    plan = seqtest.design(**PLANS[name])
    kind = plan.metric["kind"]
    rng = np.random.default_rng(3)
    for _ in range(3):
        looks = _looks(rng, kind, 5)
        for m in range(1, 6):
            B.SOLVED.clear()
            cold = seqtest.analyze(plan, looks[:m]).to_dict()
            B.SOLVED.clear()
            for q in range(1, m):
                seqtest.analyze(plan, looks[:q])
            warm = seqtest.analyze(plan, looks[:m]).to_dict()
            assert warm == cold


def test_a_new_look_solves_only_what_is_new(monkeypatch: pytest.MonkeyPatch) -> None:
    """Each analysis solves the new look and the planned looks still ahead (for the
    projection), never the looks before it again."""
    plan = seqtest.design(looks=5, metric={"kind": "binary", "baseline": 0.1, "mde": 0.01})
    looks = [{"control": {"n": n, "successes": n // 10},
              "treatment": {"n": n, "successes": n // 10 + 5}} for n in range(3000, 30001, 3000)]
    solved: list[float] = []
    original = B._solve_upper

    def counting(state, info, *args, **kwargs):  # type: ignore[no-untyped-def]
        solved.append(float(info))
        return original(state, info, *args, **kwargs)

    monkeypatch.setattr(B, "_solve_upper", counting)
    for m in range(1, 6):
        solved.clear()
        res = seqtest.analyze(plan, looks[:m])
        t_now = res.looks[-1].information_fraction
        ahead = [x for x in plan.info_fractions if x > t_now + 0.01]
        if not ahead or ahead[-1] < 1.0:
            ahead.append(1.0)
        # the new look, then the planned ones ahead: nothing earlier
        assert solved[0] == pytest.approx(t_now, rel=1e-12)
        assert len(solved) == 1 + len(ahead)
