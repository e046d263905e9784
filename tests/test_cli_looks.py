"""``seqtest analyze``: where the looks come from (layouts, column and arm names, help).

The layouts are those of seqtest.monitoring.lookfile; the command line must read every
file the library reads, with the same mapping, and give the library's analysis. The
help's list of columns is generated from the library's metric field table, so it is
checked against that table here, not against a copy.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

import seqtest
from seqtest.cli import main
from seqtest.cli.demo import DEMO_PLAN
from seqtest.monitoring.lookfile import FIELD_ALIASES, read_looks_csv
from seqtest.monitoring.metrics import ALTERNATIVE_FIELDS, METRIC_FIELDS
from seqtest.reporting.status import exit_status

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE = ROOT / "examples" / "checkout_looks.csv"


def run(argv: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str, str]:
    try:
        rc = main(argv)
    except SystemExit as exc:          # --help
        rc = int(exc.code or 0)
    out, err = capsys.readouterr()
    return rc, out, err


@pytest.fixture
def plan_file(tmp_path: Path) -> Path:
    p = tmp_path / "plan.json"
    p.write_text(json.dumps(seqtest.design(**DEMO_PLAN).to_dict()))
    return p


def _example_rows() -> list[list[int]]:
    lines = EXAMPLE.read_text().strip().splitlines()
    header = lines[0].split(",")
    idx = [header.index(c) for c in ("control_n", "control_successes", "treatment_n",
                                     "treatment_successes")]
    return [[int(line.split(",")[i]) for i in idx] for line in lines[1:]]


def _analysis_json(argv: list[str], capsys: pytest.CaptureFixture[str]) -> dict:
    # the command exits with the decision's documented status (seqtest.reporting.status)
    rc, out, err = run([*argv, "--json", "-"], capsys)
    doc = dict(json.loads(out))
    assert rc == exit_status(doc), err
    return doc


def test_help_lists_the_columns_of_every_kind_from_the_field_table(capsys):
    rc, out, _ = run(["analyze", "--help"], capsys)
    assert rc == 0
    text = " ".join(out.split())                      # the help wraps long lines
    for kind, fields in METRIC_FIELDS.items():
        wide = ", ".join(f"{arm}_{f}" for arm in ("control", "treatment") for f in fields)
        long = ", ".join(["look", "arm", *fields])
        assert f"{kind} {wide}" in text, kind
        assert f"{kind} {long}" in text, kind
        for alt in ALTERNATIVE_FIELDS.get(kind, ()):
            assert alt in text
    for alias, field in FIELD_ALIASES.items():
        assert alias in text and field in text
    for option in ("--column NAME=ARM.TOTAL", "--control ARM", "--sql QUERY",
                   "--database-url URL"):
        assert option in text


def test_top_level_help_does_not_load_the_numerical_stack():
    # the columns are generated only when 'analyze --help' is shown (start-up stays light)
    import subprocess
    import sys
    code = ("import sys\nfrom seqtest.cli import build_parser\nbuild_parser()\n"
            "print('numpy' in sys.modules, 'seqtest.monitoring.metrics' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout.split()
    assert out == ["False", "False"]


def test_long_layout_file_with_arm_names_gives_the_wide_file_s_analysis(
        tmp_path, plan_file, capsys):
    long = tmp_path / "long.csv"
    lines = ["look,arm,users,conversions"]
    for k, (nc, sc, nt, st) in enumerate(_example_rows(), start=1):
        lines += [f"{k},one_click,{nt},{st}", f"{k},control,{nc},{sc}"]
    long.write_text("\n".join(lines) + "\n")
    wide = _analysis_json(["analyze", str(EXAMPLE), "--plan", str(plan_file)], capsys)
    assert _analysis_json(["analyze", str(long), "--plan", str(plan_file)], capsys) == wide
    # and the library's analysis of the same file
    lib = seqtest.analyze(seqtest.design(**DEMO_PLAN), read_looks_csv(long, "binary"))
    assert lib.to_dict() == wide


def test_columns_and_control_options(tmp_path, plan_file, capsys):
    own = tmp_path / "own.csv"
    lines = ["week,visitors_a,buyers_a,visitors_b,buyers_b,comment"]
    for k, (nc, sc, nt, st) in enumerate(_example_rows(), start=1):
        lines.append(f"{k},{nc},{sc},{nt},{st},fine")
    own.write_text("\n".join(lines) + "\n")
    wide = _analysis_json(["analyze", str(EXAMPLE), "--plan", str(plan_file)], capsys)
    argv = ["analyze", str(own), "--plan", str(plan_file), "--column", "week=look",
            "--column", "visitors_a=current.n", "--column", "buyers_a=current.successes",
            "--column", "visitors_b=one_click.n", "--column", "buyers_b=one_click.successes",
            "--column", "comment=-", "--control", "current"]
    assert _analysis_json(argv, capsys) == wide
    # without --control, the reader does not guess: it names the arms
    rc, _, err = run(argv[:-2], capsys)
    assert rc == 2
    assert "no arm is named 'control' (the arms are current, one_click)" in err
    assert "--control NAME" in err


@pytest.mark.parametrize("option, message", [
    ("--column=visitors", "--column: got 'visitors'"),
    ("--column=nope=control.n", "columns: got 'nope'; allowed is a column of the data"),
    ("--column=control_n=control.clicks", "columns['control_n']: got 'control.clicks'"),
    ("--control=placebo", "control: got 'placebo'; allowed is an arm of the data"),
])
def test_bad_mapping_options_are_refused_in_one_line(plan_file, capsys, option, message):
    rc, _, err = run(["analyze", str(EXAMPLE), "--plan", str(plan_file), option], capsys)
    assert rc == 2 and message in err and "Traceback" not in err
    assert err.count("\n") == 1


def test_more_than_two_arms_are_refused_with_the_reason(tmp_path, plan_file, capsys):
    path = tmp_path / "three.csv"
    path.write_text("look,arm,n,successes\n1,control,1000,80\n1,text_a,1000,90\n"
                    "1,text_b,1000,95\n")
    rc, _, err = run(["analyze", str(path), "--plan", str(plan_file)], capsys)
    assert rc == 2
    assert "3 arms (control, text_a, text_b)" in err
    assert "with an experiment plan" in err


def test_a_bad_cell_names_look_arm_total_and_column(tmp_path, plan_file, capsys):
    path = tmp_path / "bad.csv"
    path.write_text("look,arm,users,conversions\n1,control,1000,80\n1,one_click,1000,90\n"
                    "2,control,2000,170\n2,one_click,2000,2001\n")
    rc, _, err = run(["analyze", str(path), "--plan", str(plan_file)], capsys)
    assert rc == 2
    assert "look 2, arm one_click, field successes: 2001 is above n = 2000" in err
    assert "(column 'conversions')" in err
