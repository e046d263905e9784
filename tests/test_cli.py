"""The `seqtest` command: plan, analyze, demo; bad input gives exit 2 and one line."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import seqtest
from seqtest.cli import main

ROOT = Path(__file__).resolve().parent.parent
EXAMPLE = ROOT / "examples" / "checkout_looks.csv"


def run(args: list[str], capsys) -> tuple[int, str, str]:
    rc = main(args)
    out, err = capsys.readouterr()
    return rc, out, err


def test_plan_table_matches_library(capsys):
    rc, out, _ = run(["plan", "--looks", "5"], capsys)
    assert rc == 0
    plan = seqtest.design(looks=5)
    for z in plan.efficacy_z:
        assert f"{z:.4f}" in out
    assert "p_threshold" in out and "cumulative_alpha" in out and "futility_z" in out


def test_plan_json_round_trip(tmp_path, capsys):
    target = tmp_path / "plan.json"
    rc, _, _ = run(["plan", "--looks", "4", "--futility", "pocock-type", "--metric",
                    "binary", "--baseline", "0.1", "--mde", "0.02", "--json", str(target)],
                   capsys)
    assert rc == 0
    doc = json.loads(target.read_text())
    assert doc["kind"] == "group_sequential" and doc["version"] == seqtest.__version__
    back = seqtest.plan_from_dict(doc)
    direct = seqtest.design(looks=4, futility="pocock-type",
                            metric={"kind": "binary", "baseline": 0.1, "mde": 0.02})
    np.testing.assert_allclose(back.efficacy_z, direct.efficacy_z, rtol=0, atol=1e-12)
    np.testing.assert_allclose(back.futility_z, direct.futility_z, rtol=0, atol=1e-12)
    assert back.sample_size().n_control == direct.sample_size().n_control


def test_plan_json_to_stdout_is_pure_json(capsys):
    rc, out, _ = run(["plan", "--json", "-"], capsys)
    assert rc == 0
    assert json.loads(out)["kind"] == "group_sequential"


def test_plan_csv(tmp_path, capsys):
    target = tmp_path / "plan.csv"
    rc, _, _ = run(["plan", "--looks", "3", "--csv", str(target)], capsys)
    assert rc == 0
    import pandas as pd
    frame = pd.read_csv(target)
    assert list(frame["look"]) == [1, 2, 3]
    np.testing.assert_allclose(frame["efficacy_z"], seqtest.design(looks=3).efficacy_z,
                               atol=1e-12)


@pytest.mark.parametrize("args, word", [
    (["plan", "--alpha", "0"], "alpha"),
    (["plan", "--alpha", "0.6", "--sides", "1"], "alpha"),
    (["plan", "--power", "0.01"], "power"),
    (["plan", "--looks", "51"], "looks"),
    (["plan", "--looks", "0"], "looks"),
    (["plan", "--fractions", "0.5,0.4,1"], "info_fractions"),
    (["plan", "--fractions", "0.5,1.2"], "info_fractions"),
    (["plan", "--efficacy", "fastest"], "efficacy"),
    (["plan", "--metric", "binary", "--mde", "0.02"], "baseline"),
    (["plan", "--mde", "0.02"], "--mde"),
])
def test_plan_bad_input_exit_2_one_line(args, word, capsys):
    rc, out, err = run(args, capsys)
    assert rc == 2
    assert word in err
    assert err.count("\n") == 1 and "Traceback" not in err


def test_bad_input_in_a_real_process_has_no_traceback():
    proc = subprocess.run([sys.executable, "-m", "seqtest", "plan", "--alpha", "2"],
                          capture_output=True, text=True)
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr and "alpha" in proc.stderr


@pytest.fixture
def plan_file(tmp_path):
    from seqtest.cli.demo import DEMO_PLAN
    p = tmp_path / "plan.json"
    p.write_text(json.dumps(seqtest.design(**DEMO_PLAN).to_dict()))
    return p


def test_analyze_example(plan_file, tmp_path, capsys):
    png = tmp_path / "looks.png"
    out_json = tmp_path / "analysis.json"
    rc, out, _ = run(["analyze", str(EXAMPLE), "--plan", str(plan_file), "--json",
                      str(out_json), "--plot", str(png)], capsys)
    doc = json.loads(out_json.read_text())
    # the exit status is the decision's (seqtest.reporting.status): the example stops
    assert rc == {"continue": 0, "stop_efficacy": 3, "stop_futility": 3,
                  "complete_not_significant": 5}[doc["decision"]]
    assert doc["decision"] in ("continue", "stop_efficacy", "stop_futility",
                               "complete_not_significant")
    for item in doc["looks"]:
        for key in ("z", "efficacy_z", "futility_z", "information_fraction"):
            assert key in item
    assert "Decision at look" in out and "statistician" in out
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    # the CLI's decision is the library's
    from seqtest.monitoring.lookfile import read_looks_csv
    lib = seqtest.analyze(seqtest.plan_from_dict(json.loads(plan_file.read_text())),
                          read_looks_csv(EXAMPLE, "binary"))
    assert lib.decision == doc["decision"]


def test_analyze_unknown_column(plan_file, tmp_path, capsys):
    bad = tmp_path / "looks.csv"
    bad.write_text("control_n,control_wins,treatment_n,treatment_successes\n10,1,10,2\n")
    rc, _, err = run(["analyze", str(bad), "--plan", str(plan_file)], capsys)
    assert rc == 2
    assert "control_wins" in err and "control_successes" in err


def test_analyze_totals_backwards(plan_file, tmp_path, capsys):
    bad = tmp_path / "looks.csv"
    bad.write_text("control_n,control_successes,treatment_n,treatment_successes\n"
                   "1000,80,1000,90\n900,85,1100,95\n")
    rc, _, err = run(["analyze", str(bad), "--plan", str(plan_file)], capsys)
    assert rc == 2
    assert "look 2" in err and "control" in err and "n" in err


def test_analyze_missing_plan(tmp_path, capsys):
    rc, _, err = run(["analyze", str(EXAMPLE), "--plan", str(tmp_path / "nope.json")], capsys)
    assert rc == 2 and "does not exist" in err


def test_demo_without_service(tmp_path, capsys):
    rc, out, _ = run(["demo", "--out", str(tmp_path / "demo"), "--no-service"], capsys)
    assert rc == 0
    assert (tmp_path / "demo" / "plan.json").exists()
    assert (tmp_path / "demo" / "looks.png").exists()
    assert "Decision at look" in out


def test_mixture_plan_and_analysis(tmp_path, capsys):
    # A mixture plan goes in the same plan document (kind "mixture") and through the
    # same analyze command.
    plan_path = tmp_path / "mix.json"
    rc, out, _ = run(["plan", "--kind", "mixture", "--metric", "binary", "--baseline", "0.08",
                      "--mde", "0.012", "--max-n-per-arm", "20000", "--json", str(plan_path)],
                     capsys)
    assert rc == 0 and "mixture" in out
    doc = json.loads(plan_path.read_text())
    assert doc["kind"] == "mixture"
    out_json = tmp_path / "a.json"
    png = tmp_path / "m.png"
    rc, out, _ = run(["analyze", str(EXAMPLE), "--plan", str(plan_path), "--json",
                      str(out_json), "--plot", str(png)], capsys)
    res = json.loads(out_json.read_text())
    assert rc == {"continue": 0, "stop_efficacy": 3,
                  "complete_not_significant": 5}[res["decision"]]
    assert "always-valid p" in out and "confidence sequence" in out
    assert res["plan_kind"] == "mixture"
    pv = [x["always_valid_p"] for x in res["looks"]]
    assert all(b <= a for a, b in zip(pv, pv[1:], strict=False))  # running minimum
    assert png.exists()


def test_mixture_plan_refuses_look_options(capsys):
    rc, _, err = run(["plan", "--kind", "mixture", "--looks", "5", "--metric", "binary",
                      "--baseline", "0.1", "--mde", "0.02"], capsys)
    assert rc == 2 and "--looks" in err


def test_every_command_with_a_metric_option_offers_every_metric_kind():
    # one vocabulary: a command that takes --metric offers the library's kinds (post
    # once offered only the first three)
    import argparse

    from seqtest.cli import build_parser
    from seqtest.core.vocabulary import METRIC_KINDS
    parser = build_parser()
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    seen = []
    for name, command in sub.choices.items():
        for action in command._actions:
            if "--metric" in action.option_strings:
                seen.append(name)
                assert tuple(action.choices) == tuple(METRIC_KINDS), name
    assert {"plan", "analyze", "post"} <= set(seen)
