"""The service's part of ``seqtest demo`` agrees with the library on the same looks."""

from __future__ import annotations

import seqtest
from service.demo import post_demo_looks


def test_demo_looks_through_http_agree_with_the_library(tmp_path):
    plan = seqtest.design(looks=4, metric={"kind": "binary", "baseline": 0.08, "mde": 0.012})
    looks = [
        {"control": {"n": 2500 * k, "successes": 200 * k},
         "treatment": {"n": 2500 * k, "successes": 200 * k + 45 * k}}
        for k in range(1, 5)
    ]
    expected = "continue"
    for upto in range(1, len(looks) + 1):
        expected = seqtest.analyze(plan, looks[:upto], metric="binary").decision
        if expected != "continue":
            break
    assert post_demo_looks(plan.to_dict(), looks, tmp_path / "demo.db") == expected
