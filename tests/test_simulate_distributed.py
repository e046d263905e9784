"""Simulations on other backends (a Dask LocalCluster, local processes) and progress
from inside the chunks: the same numbers, bit for bit, whatever runs the chunks and
however often progress is reported (chunk i always draws from SeedSequence(seed,
spawn_key=(i,)) and chunk totals are summed in chunk order, in integers)."""

from __future__ import annotations

import importlib.util
import json
import sys
from pathlib import Path

import pytest

import seqtest
from seqtest.cli import main as cli_main
from seqtest.simulation import runner as runner_mod
from seqtest.simulation.engine import simulate
from seqtest.simulation.runner import dask_client
from seqtest.simulation.scenarios import scenario_from_dict

ROOT = Path(__file__).resolve().parents[1]
BINARY = {"kind": "binary", "baseline": 0.10, "mde": 0.02}
RANDOM = {"mode": "random", "days": 21, "cv": 0.4, "cap": True, "final": "at_max"}


def _plan(**kw):
    base = {"alpha": 0.05, "sides": 2, "power": 0.9, "looks": 5, "metric": BINARY}
    base.update(kw)
    return seqtest.design(**base)


def _scenario(**kw):
    doc = {"name": "dist", "data": {"kind": "binary", "rate": 0.10}, "traffic": RANDOM}
    doc.update(kw)
    return scenario_from_dict(doc)


@pytest.fixture(scope="module")
def client():
    pytest.importorskip("distributed", reason="needs the dask extra")
    with dask_client("local", workers=2, processes=False) as c:
        yield c


def _same(a, b):
    return json.dumps(a.to_dict()) == json.dumps(b.to_dict())


def test_local_cluster_gives_the_local_result_bit_for_bit(client, monkeypatch):
    # Random traffic through the screen (and a few exact boundaries), and a plan whose
    # futility is obeyed (every replicate's boundaries computed on the workers).
    monkeypatch.setattr(runner_mod, "PROGRESS_SECONDS", 0.0)
    cases = [(_plan(), _scenario(), 2_000),
             (_plan(looks=3, futility="pocock-type"),
              _scenario(effect={"mde_multiple": 0.5}), 150)]
    for plan, sc, reps in cases:
        here = simulate(plan, sc, reps, seed=9, chunk_size=reps // 5)
        seen: list[tuple[int, int]] = []
        there = simulate(plan, sc, reps, seed=9, chunk_size=reps // 5, client=client,
                         progress=lambda d, t, seen=seen: seen.append((d, t)))
        assert _same(here, there)
        assert seen[-1] == (reps, reps)
        assert all(b[0] >= a[0] for a, b in zip(seen, seen[1:], strict=False))
        if reps == 150:    # each chunk takes long enough to report from inside it
            assert any(d % (reps // 5) for d, _ in seen)
    # a different seed gives a different result (the comparison can fail)
    other = simulate(cases[0][0], cases[0][1], 2_000, seed=10, chunk_size=400, client=client)
    assert not _same(other, simulate(cases[0][0], cases[0][1], 2_000, seed=9, chunk_size=400))


def test_progress_moves_inside_a_chunk_without_changing_the_result(monkeypatch):
    # One chunk holding every replicate, futility obeyed so each replicate needs its
    # boundaries: progress still moves inside it, and reporting at every step gives
    # the same numbers as not reporting.
    monkeypatch.setattr(runner_mod, "PROGRESS_SECONDS", 0.0)
    plan = _plan(looks=3, futility="pocock-type")
    sc = _scenario()
    seen = []
    with_progress = simulate(plan, sc, 120, seed=3, chunk_size=120,
                             progress=lambda d, t: seen.append(d))
    without = simulate(plan, sc, 120, seed=3, chunk_size=120)
    assert _same(with_progress, without)
    inside = [d for d in seen if 0 < d < 120]
    assert len(set(inside)) >= 50          # finer than 1% of the work ... at least 50 steps
    assert seen == sorted(seen) and seen[-1] == 120


def test_local_processes_report_progress_and_agree(monkeypatch):
    monkeypatch.setattr(runner_mod, "PROGRESS_SECONDS", 0.0)   # handed to the workers
    plan = _plan(looks=3, futility="pocock-type")
    sc = _scenario()
    seen = []
    two = simulate(plan, sc, 160, seed=5, chunk_size=80, workers=2,
                   progress=lambda d, t: seen.append(d))
    one = simulate(plan, sc, 160, seed=5, chunk_size=80)
    assert _same(one, two)
    assert seen[-1] == 160 and seen == sorted(seen)
    assert any(d % 80 for d in seen)       # reported from inside a chunk


def _validate_module():
    if "seqtest_validate" not in sys.modules:
        spec = importlib.util.spec_from_file_location("seqtest_validate",
                                                      ROOT / "simulations" / "validate.py")
        mod = importlib.util.module_from_spec(spec)
        sys.modules["seqtest_validate"] = mod
        spec.loader.exec_module(mod)
    return sys.modules["seqtest_validate"]


def test_validation_cells_on_a_cluster_give_the_same_numbers(client):
    v = _validate_module()
    cells = [c for c in v.build_grid("reduced", reps=3_000, random_reps=400)
             if c.id.startswith(("random-", "fixed-binary-OF-type", "futility-binding"))]
    assert len(cells) >= 4
    here = v.run_cells(cells, seed=1)
    there = v.run_cells(cells, seed=1, client=client)
    for a, b in zip(here, there, strict=True):
        assert a.cell.id == b.cell.id
        assert _same(a.result, b.result)


def test_a_spent_budget_leaves_later_cells_unrun():
    v = _validate_module()
    cells = v.build_grid("reduced", reps=500, random_reps=100)[:3]
    out = v.run_cells(cells, seed=0, budget_seconds=-1.0)
    assert [r.result for r in out] == [None, None, None]
    assert all(r.error == "not run: time budget spent" for r in out)


def test_a_bad_scheduler_is_refused_in_one_line(capsys):
    code = cli_main(["simulate", "--plan", str(ROOT / "simulations/plans/binary_obf5.json"),
                     "--scenario", str(ROOT / "simulations/scenarios/binary_null_fixed.toml"),
                     "--reps", "10", "--scheduler", "not an address"])
    err = capsys.readouterr().err
    assert code == 2
    assert "--scheduler: got 'not an address'; allowed is a Dask scheduler address" in err
