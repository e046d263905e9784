"""Tests for seqtest.monitoring.lookfile: the CSV layout of looks.

The layout is the one documented in the module docstring of seqtest.monitoring.lookfile (one
row per look, ``<arm>_<field>`` columns of cumulative totals, the alternative names
listed there). Numerical checks of an analysed file name their outside source.
"""

from __future__ import annotations

import math

import pandas as pd
import pytest
from statsmodels.stats import proportion as sm_proportion

import seqtest
from seqtest.monitoring.lookfile import expected_columns, looks_from_frame, read_looks_csv
from seqtest.monitoring.metrics import METRIC_FIELDS, LookDataError

BINARY_ROWS = [(1000, 100, 1000, 112), (2000, 205, 2000, 236), (3000, 301, 3000, 352)]
BINARY_LOOKS = [{"control": {"n": nc, "successes": sc}, "treatment": {"n": nt, "successes": st}}
                for nc, sc, nt, st in BINARY_ROWS]


def _write(tmp_path, header: str, rows, name="looks.csv"):
    p = tmp_path / name
    lines = [header] + [",".join(str(v) for v in r) for r in rows]
    p.write_text("\n".join(lines) + "\n")
    return p


@pytest.mark.parametrize("kind", list(METRIC_FIELDS))
def test_expected_columns_follow_the_documented_layout(kind):
    # documented layout: <arm>_<field>, control first, fields of the metric kind
    cols = expected_columns(kind)
    assert cols == [f"{arm}_{f}" for arm in ("control", "treatment")
                    for f in METRIC_FIELDS[kind]]
    with pytest.raises(ValueError, match="kind"):
        expected_columns("ratio")


# headers that all mean control_n, control_successes, treatment_n, treatment_successes
BINARY_HEADERS = [
    "control_n,control_successes,treatment_n,treatment_successes",
    "n_control,successes_control,n_treatment,successes_treatment",        # field_arm
    "c_n,c_successes,t_n,t_successes",                                     # arm c / t
    "control_users,control_conversions,treatment_users,treatment_conversions",
    "Control Users,Control.Conversions,Treatment-Users,TREATMENT_CONVERSIONS",
    "users_c,conversions_c,users_t,conversions_t",
    "treatment_n,treatment_successes,control_n,control_successes",         # any order
]


@pytest.mark.parametrize("header", BINARY_HEADERS)
@pytest.mark.parametrize("kind", ["binary", None])
def test_binary_csv_with_documented_alternative_names(tmp_path, header, kind):
    rows = BINARY_ROWS
    if header.startswith("treatment_n"):
        rows = [(nt, st, nc, sc) for nc, sc, nt, st in BINARY_ROWS]
    looks = read_looks_csv(_write(tmp_path, header, rows), kind)
    assert looks == BINARY_LOOKS


def test_optional_look_date_note_columns_are_kept_aside(tmp_path):
    header = "look,date,note,control_n,control_successes,treatment_n,treatment_successes"
    rows = [(i + 1, f"2026-03-0{i + 1}", "batch" if i == 1 else "", *r)
            for i, r in enumerate(BINARY_ROWS)]
    assert read_looks_csv(_write(tmp_path, header, rows), "binary") == BINARY_LOOKS


@pytest.mark.parametrize("header", [
    "control_n,control_sum,control_sum_sq,treatment_n,treatment_sum,treatment_sum_sq",
    "control_n,control_sum,control_sumsq,treatment_n,treatment_sum,treatment_sumsq",
    "c_n,c_sum,c_sum_squares,t_n,t_sum,t_sum_squares",
])
def test_continuous_sums_csv(tmp_path, header):
    rows = [(400, 2010.5, 10_400.25, 410, 2080.0, 10_900.5)]
    looks = read_looks_csv(_write(tmp_path, header, rows), "continuous")
    assert looks == [{"control": {"n": 400, "sum": 2010.5, "sum_sq": 10_400.25},
                      "treatment": {"n": 410, "sum": 2080.0, "sum_sq": 10_900.5}}]


@pytest.mark.parametrize("sd_name", ["sd", "std"])
def test_continuous_mean_sd_csv(tmp_path, sd_name):
    header = (f"control_n,control_mean,control_{sd_name},"
              f"treatment_n,treatment_mean,treatment_{sd_name}")
    looks = read_looks_csv(_write(tmp_path, header, [(400, 5.1, 1.2, 410, 5.3, 1.25)]),
                           "continuous")
    assert looks == [{"control": {"n": 400, "mean": 5.1, "sd": 1.2},
                      "treatment": {"n": 410, "mean": 5.3, "sd": 1.25}}]


def test_rate_csv(tmp_path):
    header = "control_exposure,control_events,treatment_exposure,treatment_events"
    looks = read_looks_csv(_write(tmp_path, header, [(1500.5, 30, 1490.0, 45)]), "rate")
    assert looks == [{"control": {"exposure": 1500.5, "events": 30},
                      "treatment": {"exposure": 1490.0, "events": 45}}]


def test_analysing_a_csv_gives_the_same_as_the_dicts(tmp_path):
    # The DataFrame door and the list-of-dicts door of analyze() are one analysis.
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=3,
                          metric={"kind": "binary", "baseline": 0.1, "mde": 0.02})
    header = "users_c,conversions_c,users_t,conversions_t"
    frame = pd.read_csv(_write(tmp_path, header, BINARY_ROWS))
    a_frame = seqtest.analyze(plan, frame).to_dict()
    a_dicts = seqtest.analyze(plan, BINARY_LOOKS).to_dict()
    assert a_frame == a_dicts


def test_one_look_csv_is_the_score_test(tmp_path):
    # Source: statsmodels test_proportions_2indep(method="score", correction=False) (the
    # pooled score statistic binary metrics are tested with, before the skewness
    # correction) for a one-look plan read from a file.
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=1)
    path = _write(tmp_path, "c_users,c_conversions,t_users,t_conversions",
                  [(12_000, 1210, 12_100, 1330)])
    an = seqtest.analyze(plan, read_looks_csv(path, "binary"), metric="binary",
                         max_n=24_100)
    ref = sm_proportion.test_proportions_2indep(1330, 12_100, 1210, 12_000, method="score",
                                                compare="diff", correction=False)
    look = an.looks[0]
    assert look.test_estimate / look.se == pytest.approx(ref.statistic, rel=1e-9)
    # the skewness correction is small with these counts (|skewness| < 0.01)
    assert abs(look.skewness) < 0.01
    assert an.final.p_value == pytest.approx(ref.pvalue, rel=1e-2)


# ---------------------------------------------------------------------------
# Refused files
# ---------------------------------------------------------------------------

def test_missing_column_is_refused_naming_it(tmp_path):
    path = _write(tmp_path, "control_n,control_successes,treatment_n", [(100, 10, 100)])
    with pytest.raises(LookDataError) as exc:
        read_looks_csv(path, "binary")
    msg = str(exc.value)
    assert "treatment_successes" in msg and "missing" in msg
    # the expected layout is spelled out
    assert "control_n, control_successes, treatment_n, treatment_successes" in msg


def test_missing_column_through_analyze_names_look_arm_and_field(tmp_path):
    # analyze() reads the frame with the plan's metric kind, so the missing column is
    # named as a column of the file (it concerns every look, so no look number)
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=3,
                          metric={"kind": "binary", "baseline": 0.1, "mde": 0.02})
    frame = pd.read_csv(_write(tmp_path, "control_n,control_successes,treatment_n",
                               [(100, 10, 100)]))
    with pytest.raises(LookDataError) as exc:
        seqtest.analyze(plan, frame)
    e = exc.value
    assert (e.look, e.arm, e.field) == (None, "treatment", "successes")
    assert "missing column" in str(e) and "treatment_successes" in str(e)


@pytest.mark.parametrize("kind", ["binary", None])
def test_unknown_column_is_refused_naming_it(tmp_path, kind):
    header = "control_n,control_successes,treatment_n,treatment_successes,revenue"
    path = _write(tmp_path, header, [(100, 10, 100, 12, 5.0)])
    with pytest.raises(LookDataError) as exc:
        read_looks_csv(path, kind)
    msg = str(exc.value)
    assert "unknown column" in msg and "revenue" in msg
    assert "control_successes" in msg        # lists what was expected
    assert exc.value.field == "revenue"


@pytest.mark.parametrize("header", ["control_x,control_successes,treatment_n,treatment_successes",
                                    "placebo_n,placebo_successes,treatment_n,treatment_successes"])
def test_unknown_arm_or_field_is_refused(tmp_path, header):
    with pytest.raises(LookDataError, match="unknown column"):
        read_looks_csv(_write(tmp_path, header, [(100, 10, 100, 12)]), "binary")


def test_misnumbered_look_column_is_refused(tmp_path):
    header = "look,control_n,control_successes,treatment_n,treatment_successes"
    rows = [(1, *BINARY_ROWS[0]), (3, *BINARY_ROWS[1])]
    with pytest.raises(LookDataError, match="look") as exc:
        read_looks_csv(_write(tmp_path, header, rows), "binary")
    assert exc.value.field == "look"


def test_empty_cell_is_refused_naming_look_arm_and_field(tmp_path):
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=3,
                          metric={"kind": "binary", "baseline": 0.1, "mde": 0.02})
    path = tmp_path / "gap.csv"
    path.write_text("control_n,control_successes,treatment_n,treatment_successes\n"
                    "1000,100,1000,112\n2000,205,2000,\n")
    looks = read_looks_csv(path, "binary")
    assert math.isnan(looks[1]["treatment"]["successes"])
    with pytest.raises(LookDataError) as exc:
        seqtest.analyze(plan, looks)
    assert (exc.value.look, exc.value.arm, exc.value.field) == (2, "treatment", "successes")


def test_totals_going_backwards_in_a_file_are_refused(tmp_path):
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=3,
                          metric={"kind": "binary", "baseline": 0.1, "mde": 0.02})
    rows = [BINARY_ROWS[0], (2000, 205, 990, 236)]
    path = _write(tmp_path, "control_n,control_successes,treatment_n,treatment_successes", rows)
    with pytest.raises(LookDataError) as exc:
        seqtest.analyze(plan, read_looks_csv(path, "binary"))
    assert (exc.value.look, exc.value.arm, exc.value.field) == (2, "treatment", "n")
    assert "look 2" in str(exc.value)


def test_missing_or_empty_file_is_refused(tmp_path):
    with pytest.raises(ValueError, match="does not exist"):
        read_looks_csv(tmp_path / "nowhere.csv")
    empty = tmp_path / "empty.csv"
    empty.write_text("")
    with pytest.raises(ValueError, match="looks file"):
        read_looks_csv(empty)
    header_only = tmp_path / "header.csv"
    header_only.write_text("control_n,control_successes,treatment_n,treatment_successes\n")
    with pytest.raises(ValueError, match="no rows"):
        read_looks_csv(header_only)


def test_looks_from_frame_accepts_a_frame_directly():
    frame = pd.DataFrame(BINARY_ROWS, columns=["c_n", "c_successes", "t_n", "t_successes"])
    assert looks_from_frame(frame, "binary") == BINARY_LOOKS


def test_two_columns_for_one_total_are_refused(tmp_path):
    # The same total given twice (n and its alternative name users) is ambiguous.
    frame = pd.read_csv(_write(tmp_path, "control_n,control_users,control_successes,"
                               "treatment_n,treatment_successes", [(100, 100, 10, 100, 12)]))
    with pytest.raises(LookDataError) as exc:
        looks_from_frame(frame, "binary")
    assert exc.value.arm == "control" and exc.value.field == "n"
    assert "control_n" in str(exc.value) and "control_users" in str(exc.value)
