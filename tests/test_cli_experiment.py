"""`seqtest plan --arms`, `analyze` and `simulate` with experiment plans.

The numbers printed are checked against the library (seqtest.experiment_plan,
seqtest.analyze); bad input gives exit status 2 and one line."""

from __future__ import annotations

import json

import numpy as np

from seqtest.cli import main
from seqtest.planning.documents import plan_from_dict
from seqtest.planning.experiment import experiment_plan


def run(args: list[str], capsys) -> tuple[int, str, str]:
    rc = main(args)
    out, err = capsys.readouterr()
    return rc, out, err


PLAN = ["plan", "--arms", "control,blue,green", "--metric", "binary", "--baseline", "0.1",
        "--mde", "0.02", "--sides", "1", "--alpha", "0.025", "--looks", "3"]


def test_plan_prints_boundaries_per_comparison_and_writes_the_document(tmp_path, capsys):
    target = tmp_path / "exp.json"
    rc, out, _ = run([*PLAN, "--json", str(target)], capsys)
    assert rc == 0
    ref = experiment_plan(["control", "blue", "green"],
                          {"kind": "binary", "baseline": 0.1, "mde": 0.02},
                          alpha=0.025, sides=1, looks=3)
    assert "blue/binary, green/binary (level 0.0125)" in out
    for z in ref.primaries[0].plan.efficacy_z:
        assert f"{z:.4f}" in out
    assert str(int(ref.sizes["binary"]["green"][-1])) in out
    assert plan_from_dict(json.loads(target.read_text())) == ref


def test_plan_dunnett_and_an_experiment_file(tmp_path, capsys):
    rc, out, _ = run(["plan", "--arms", "3", "--metric", "continuous", "--sd", "1",
                      "--mde", "0.1", "--sides", "1", "--alpha", "0.025", "--looks", "2",
                      "--method", "dunnett"], capsys)
    assert rc == 0 and "common Dunnett-type boundaries" in out
    spec = {"arms": ["control", "a", "b"], "alpha": 0.025, "sides": 1, "looks": 2,
            "metrics": [{"name": "orders", "kind": "binary", "baseline": 0.1, "mde": 0.02},
                        {"name": "load", "role": "guardrail", "kind": "continuous",
                         "sd": 1.0, "mde": 0.1, "better": "lower"}]}
    f = tmp_path / "spec.json"
    f.write_text(json.dumps(spec))
    rc, out, _ = run(["plan", "--experiment", str(f)], capsys)
    assert rc == 0 and "guardrail harm test: a/load, b/load (level 0.05)" in out


def test_margin_better_and_hypothesis_apply_to_the_command_line_metric(tmp_path, capsys):
    # the same spelling as a two-arm plan; references: seqtest.experiment_plan with the
    # same metric, and (one treatment) the two-arm plan seqtest.design makes of it
    import seqtest
    opts = ["--metric", "rate", "--baseline", "2.0", "--mde", "-0.1", "--better", "lower",
            "--margin", "0.05", "--hypothesis", "non_inferiority", "--sides", "1",
            "--alpha", "0.025", "--looks", "3"]
    metric = {"kind": "rate", "baseline": 2.0, "mde": -0.1, "better": "lower",
              "margin": 0.05, "hypothesis": "non_inferiority"}
    target = tmp_path / "exp.json"
    rc, out, _ = run(["plan", "--arms", "3", *opts, "--json", str(target)], capsys)
    assert rc == 0, out
    ref = experiment_plan(3, metric, alpha=0.025, sides=1, looks=3)
    assert plan_from_dict(json.loads(target.read_text())) == ref
    assert ref.metrics[0].better == "lower" and ref.metrics[0].margin == 0.05
    assert "non-inferiority against a margin of 0.05" in out
    rc, out, _ = run(["plan", "--arms", "2", *opts, "--json", str(target)], capsys)
    assert rc == 0
    two = seqtest.design(alpha=0.025, sides=1, looks=3, metric=metric)
    one = plan_from_dict(json.loads(target.read_text()))
    assert one.comparisons[0].plan == two
    assert one.max_n("rate", "control") == two.n_control[-1]
    # a margin on the wrong side is refused as for a two-arm plan, in one line
    rc, _, err = run(["plan", "--arms", "3", *opts[:-6], "--hypothesis", "superiority",
                      "--sides", "1"], capsys)
    assert rc == 2 and "metrics[0].margin (rate): got 0.05 for a superiority test" in err
    assert err.count("\n") == 1


def test_bad_experiment_options_give_one_line(capsys):
    for args, message in (
            (["plan", "--arms", "1", "--metric", "binary", "--baseline", "0.1", "--mde",
              "0.02"], "arms: got 1"),
            (["plan", "--arms", "10", "--metric", "binary", "--baseline", "0.1", "--mde",
              "0.02"], "arms: got 10"),
            (["plan", "--arms", "3"], "needs its metric"),
            (["plan", "--arms", "3", "--metric", "binary", "--baseline", "0.1", "--mde",
              "0.02", "--allocations", "1,0"], "allocations['treatment_2']: got 0.0")):
        rc, _, err = run(args, capsys)
        assert rc == 2 and message in err and err.count("\n") == 1, err


def _looks_csv(path, plan, effects, looks=2, seed=1):
    rng = np.random.default_rng(seed)
    rows = ["look,arm,n,successes"]
    succ = {a: 0 for a in plan.arms}
    prev = 0
    for k in range(looks):
        n = int(plan.sizes["binary"]["control"][k])
        for a in plan.arms:
            succ[a] += int(rng.binomial(n - prev, 0.1 + effects.get(a, 0.0)))
            rows.append(f"{k + 1},{a},{n},{succ[a]}")
        prev = n
    path.write_text("\n".join(rows) + "\n")


def test_analyze_takes_the_long_layout_with_many_arms(tmp_path, capsys):
    plan_path = tmp_path / "exp.json"
    run([*PLAN, "--json", str(plan_path)], capsys)
    plan = plan_from_dict(json.loads(plan_path.read_text()))
    looks = tmp_path / "looks.csv"
    _looks_csv(looks, plan, {"green": 0.04})
    out_json = tmp_path / "an.json"
    rc, out, _ = run(["analyze", str(looks), "--plan", str(plan_path), "--json",
                      str(out_json)], capsys)
    doc = json.loads(out_json.read_text())
    assert doc["kind"] == "experiment"
    assert [a["arm"] for a in doc["arms"]] == ["blue", "green"]
    green = next(a for a in doc["arms"] if a["arm"] == "green")
    assert green["decision"] == "stop_efficacy" and green["winner"]
    assert "Decision: continue" in out and "green is better than control" in out
    assert rc == 0                     # blue still runs


def test_analyze_json_looks_with_several_metrics_and_bad_looks(tmp_path, capsys):
    plan = experiment_plan(["control", "a"], [
        {"name": "orders", "kind": "binary", "baseline": 0.1, "mde": 0.02},
        {"name": "load", "role": "guardrail", "kind": "continuous", "sd": 1.0, "mde": 0.1,
         "better": "lower"}], alpha=0.025, sides=1, looks=2)
    plan_path = tmp_path / "exp.json"
    plan_path.write_text(json.dumps(plan.to_dict()))
    n = int(plan.sizes["orders"]["control"][0])
    look = {"orders": {"control": {"n": n, "successes": n // 10},
                       "a": {"n": n, "successes": n // 10}},
            "load": {"control": {"n": n, "mean": 1.0, "sd": 1.0},
                     "a": {"n": n, "mean": 1.5, "sd": 1.0}}}
    f = tmp_path / "looks.json"
    f.write_text(json.dumps([look]))
    rc, out, _ = run(["analyze", str(f), "--plan", str(plan_path)], capsys)
    assert rc == 3 and "Decision: stop_harm" in out and "crossed the harm boundary" in out
    del look["orders"]["a"]
    f.write_text(json.dumps([look]))
    rc, _, err = run(["analyze", str(f), "--plan", str(plan_path)], capsys)
    assert rc == 2 and "look 1, arm a" in err and "still running" in err


def test_simulate_takes_an_experiment_scenario(tmp_path, capsys):
    plan_path = tmp_path / "exp.json"
    run([*PLAN, "--json", str(plan_path)], capsys)
    sc = tmp_path / "sc.toml"
    sc.write_text('name = "green better"\n[[metrics]]\nname = "binary"\n'
                  'data = {kind = "binary", rate = 0.10}\neffects = {green = 0.02}\n')
    rc, out, _ = run(["simulate", "--plan", str(plan_path), "--scenario", str(sc),
                      "--reps", "2000", "--no-progress", "--json"], capsys)
    assert rc == 0
    doc = json.loads(out)
    assert doc["true_nulls"] == ["blue/binary"] and doc["measure"] == "family_wise_error"
    assert doc["hypotheses"]["green/binary"]["planned"] is not None
    two_arm = tmp_path / "two.toml"
    two_arm.write_text('[data]\nkind = "binary"\nrate = 0.1\n')
    rc, _, err = run(["simulate", "--plan", str(plan_path), "--scenario", str(two_arm),
                      "--reps", "10", "--no-progress"], capsys)
    assert rc == 2 and "experiment scenario" in err
