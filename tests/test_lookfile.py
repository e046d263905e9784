"""Tests for seqtest.monitoring.lookfile: tables of looks (wide and long layouts).

The layout is the one documented in the module docstring of seqtest.monitoring.lookfile (one
row per look, ``<arm>_<field>`` columns of cumulative totals, the alternative names
listed there). Numerical checks of an analysed file name their outside source.
"""

from __future__ import annotations

import pandas as pd
import pytest
from statsmodels.stats import proportion as sm_proportion

import seqtest
from seqtest.monitoring.lookfile import (
    column_mapping,
    expected_columns,
    looks_from_frame,
    read_arm_looks,
    read_looks_csv,
)
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
        expected_columns("proportion")


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


def test_unknown_field_is_refused(tmp_path):
    header = "control_x,control_successes,treatment_n,treatment_successes"
    with pytest.raises(LookDataError, match="unknown column control_x"):
        read_looks_csv(_write(tmp_path, header, [(100, 10, 100, 12)]), "binary")


def test_arms_without_a_control_are_refused_naming_them(tmp_path):
    # arm names are taken from the data; with no arm called control the reader does not
    # guess which one is the control
    header = "placebo_n,placebo_successes,treatment_n,treatment_successes"
    path = _write(tmp_path, header, [(100, 10, 100, 12)])
    with pytest.raises(LookDataError, match="no arm is named 'control'") as exc:
        read_looks_csv(path, "binary")
    assert "placebo, treatment" in str(exc.value) and "--control" in str(exc.value)
    looks = read_looks_csv(path, "binary", control="placebo")
    assert looks == [{"control": {"n": 100, "successes": 10},
                      "treatment": {"n": 100, "successes": 12}}]


def test_misnumbered_look_column_is_refused(tmp_path):
    header = "look,control_n,control_successes,treatment_n,treatment_successes"
    rows = [(1, *BINARY_ROWS[0]), (3, *BINARY_ROWS[1])]
    with pytest.raises(LookDataError, match="look") as exc:
        read_looks_csv(_write(tmp_path, header, rows), "binary")
    assert exc.value.field == "look"


def test_empty_cell_is_refused_naming_look_arm_field_and_column(tmp_path):
    # refused when the file is read (nothing half-read), with or without the kind
    path = tmp_path / "gap.csv"
    path.write_text("control_n,control_successes,treatment_n,treatment_successes\n"
                    "1000,100,1000,112\n2000,205,2000,\n")
    for kind in ("binary", None):
        with pytest.raises(LookDataError) as exc:
            read_looks_csv(path, kind)
        assert (exc.value.look, exc.value.arm, exc.value.field) == (2, "treatment",
                                                                    "successes")
        assert "'treatment_successes' is empty" in str(exc.value)


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


# ---------------------------------------------------------------------------
# Arm names from the data, the column mapping, the long layout
# ---------------------------------------------------------------------------

PLAN_BINARY = dict(alpha=0.05, sides=2, power=0.9, looks=3,
                   metric={"kind": "binary", "baseline": 0.1, "mde": 0.02})


def _wide_frame(control="control", treatment="treatment", order="arm_first"):
    cols = {}
    for arm, (i_n, i_s) in ((control, (0, 1)), (treatment, (2, 3))):
        for f, i in (("n", i_n), ("successes", i_s)):
            name = f"{arm}_{f}" if order == "arm_first" else f"{f}_{arm}"
            cols[name] = [r[i] for r in BINARY_ROWS]
    return pd.DataFrame(cols)


def _long_frame(control="control", treatment="treatment", names=("look", "arm", "n",
                                                                   "successes")):
    rows = []
    for k, (nc, sc, nt, st) in enumerate(BINARY_ROWS, start=1):
        rows += [(k, control, nc, sc), (k, treatment, nt, st)]
    return pd.DataFrame(rows, columns=list(names))


@pytest.mark.parametrize("order", ["arm_first", "field_first"])
def test_arm_names_are_taken_from_the_columns(order):
    frame = _wide_frame(treatment="rank_v1", order=order)
    table = read_arm_looks(frame, "binary")
    assert (table.control, table.treatments, table.layout) == ("control", ("rank_v1",),
                                                               "wide")
    assert table.looks[0] == {"control": {"n": 1000, "successes": 100},
                              "rank_v1": {"n": 1000, "successes": 112}}
    assert table.roles() == {"control": "control", "treatment": "rank_v1"}
    assert table.two_arm() == BINARY_LOOKS
    assert looks_from_frame(frame, "binary") == BINARY_LOOKS
    assert table.column("rank_v1", "successes") == (
        "rank_v1_successes" if order == "arm_first" else "successes_rank_v1")


def test_the_control_is_named_by_an_option():
    frame = _wide_frame(control="current_price", treatment="new_price")
    assert looks_from_frame(frame, "binary", control="current_price") == BINARY_LOOKS
    # the control's name is compared without letter case or separators
    assert looks_from_frame(frame, "binary", control="Current Price") == BINARY_LOOKS
    with pytest.raises(LookDataError, match="no arm is named 'control'"):
        looks_from_frame(frame, "binary")
    with pytest.raises(LookDataError) as exc:
        looks_from_frame(frame, "binary", control="old_price")
    assert "control: got 'old_price'" in str(exc.value)
    assert "current_price, new_price" in str(exc.value)


def test_a_column_mapping_gives_the_team_s_own_names():
    frame = pd.DataFrame({"visitors_a": [r[0] for r in BINARY_ROWS],
                          "buyers_a": [r[1] for r in BINARY_ROWS],
                          "visitors_b": [r[2] for r in BINARY_ROWS],
                          "buyers_b": [r[3] for r in BINARY_ROWS],
                          "revenue": [1.0, 2.0, 3.0]})
    mapping = {"visitors_a": "control.n", "buyers_a": "control.successes",
               "visitors_b": "free_shipping.users", "buyers_b": "free_shipping.conversions",
               "revenue": None}
    table = read_arm_looks(frame, "binary", columns=mapping)
    assert table.arms == ("control", "free_shipping")
    assert table.two_arm() == BINARY_LOOKS
    assert table.column("free_shipping", "n") == "visitors_b"
    # "-" ignores a column as None does; a mapping may mix with names read as they are
    mapping = {"visitors_b": "treatment.n", "buyers_b": "treatment.successes",
               "revenue": "-"}
    frame2 = frame.rename(columns={"visitors_a": "control_users",
                                   "buyers_a": "control_conversions"})
    assert looks_from_frame(frame2, "binary", columns=mapping) == BINARY_LOOKS


@pytest.mark.parametrize("mapping, message", [
    ({"visitors": "control.n"}, "columns: got 'visitors'; allowed is a column of the data"),
    ({"control_n": "control.clicks"}, "columns['control_n']: got 'control.clicks'"),
    ({"control_n": "n"}, "got total n without an arm; allowed in the wide layout is ARM.n"),
    ({"control_n": 3}, "columns['control_n']: got 3"),
    ({"control_n": "look", "control_successes": "look"}, "all as the look column"),
])
def test_a_bad_column_mapping_is_refused_saying_what_is_allowed(mapping, message):
    with pytest.raises(ValueError) as exc:
        read_arm_looks(_wide_frame(), "binary", columns=mapping)
    assert message in str(exc.value)


def test_an_ambiguous_column_is_refused_naming_it():
    # "n_events" reads as arm n with total events or as arm events with total n
    frame = pd.DataFrame({"n_events": [5], "control_n": [10]})
    with pytest.raises(LookDataError) as exc:
        read_arm_looks(frame)
    assert exc.value.field == "n_events"
    assert "arm 'events' with total n or arm 'n' with total events" in str(exc.value)
    assert "--column 'n_events=ARM.TOTAL'" in str(exc.value)


def test_a_reading_is_chosen_by_the_arms_the_other_columns_name():
    # sum_sq_rank_v1 alone could be arm "sq_rank_v1" with total sum; the other columns
    # name the arm rank_v1, which settles it
    frame = pd.DataFrame({"n_control": [400], "sum_control": [2010.5],
                          "sum_sq_control": [10_400.25], "n_rank_v1": [410],
                          "sum_rank_v1": [2080.0], "sum_sq_rank_v1": [10_900.5]})
    table = read_arm_looks(frame, "continuous")
    assert table.looks == [{"control": {"n": 400, "sum": 2010.5, "sum_sq": 10_400.25},
                            "rank_v1": {"n": 410, "sum": 2080.0, "sum_sq": 10_900.5}}]


def test_long_layout_reads_as_the_wide_one_in_any_row_order():
    frame = _long_frame(treatment="rank_v1")
    assert looks_from_frame(frame, "binary") == BINARY_LOOKS
    shuffled = frame.sample(frac=1.0, random_state=7)   # rows in any order
    assert looks_from_frame(shuffled, "binary") == BINARY_LOOKS
    table = read_arm_looks(shuffled, "binary")
    assert (table.layout, table.arms) == ("long", ("control", "rank_v1"))
    # alternative names and letter case, as in the wide layout
    renamed = _long_frame(names=("Look", "ARM", "Users", "Conversions"))
    assert looks_from_frame(renamed, None) == BINARY_LOOKS


def test_long_layout_with_mapped_columns_and_dates_instead_of_look_numbers():
    frame = _long_frame(control="current", treatment="bundle",
                        names=("week", "variant", "visitors", "orders"))
    frame["week"] = frame["week"].map({1: "2026-03-08", 2: "2026-03-15", 3: "2026-03-22"})
    mapping = {"week": "date", "variant": "arm", "visitors": "n", "orders": "successes"}
    table = read_arm_looks(frame.iloc[::-1], "binary", columns=mapping, control="current")
    assert table.two_arm() == BINARY_LOOKS
    assert table.dates == ["2026-03-08", "2026-03-15", "2026-03-22"]


@pytest.mark.parametrize("kind, fields, rows", [
    ("continuous", ("n", "sum", "sum_sq"), [((400, 2010.5, 10_400.25), (410, 2080.0, 10_900.5)),
                                            ((800, 4030.0, 20_900.0), (820, 4170.5, 21_800.0))]),
    ("continuous", ("n", "mean", "sd"), [((400, 5.1, 1.2), (410, 5.3, 1.25))]),
    ("rate", ("exposure", "events"), [((1500.5, 30), (1490.0, 45)),
                                      ((3000.0, 61), (2990.5, 88))]),
])
def test_long_and_wide_layouts_agree_for_every_kind(kind, fields, rows):
    long_rows, wide_rows = [], []
    for k, (c, t) in enumerate(rows, start=1):
        long_rows += [(k, "control", *c), (k, "treatment", *t)]
        wide_rows.append((*c, *t))
    long = pd.DataFrame(long_rows, columns=["look", "arm", *fields])
    wide = pd.DataFrame(wide_rows, columns=[f"{a}_{f}" for a in ("control", "treatment")
                                            for f in fields])
    assert looks_from_frame(long, kind) == looks_from_frame(wide, kind)
    assert looks_from_frame(long, kind)[0]["treatment"] == dict(zip(fields, rows[0][1],
                                                                   strict=True))


def test_analysing_a_long_frame_gives_the_same_as_the_dicts():
    # the DataFrame door of analyze() reads either layout
    plan = seqtest.design(**PLAN_BINARY)
    a_long = seqtest.analyze(plan, _long_frame(treatment="rank_v1")).to_dict()
    assert a_long == seqtest.analyze(plan, BINARY_LOOKS).to_dict()
    table = read_arm_looks(_long_frame(treatment="rank_v1"), "binary")
    assert seqtest.analyze(plan, table).to_dict() == a_long     # an ArmLooks too


def test_one_look_long_layout_is_the_score_test():
    # Source: statsmodels test_proportions_2indep(method="score") (the pooled score
    # statistic binary metrics are tested with, before the skewness correction) for a
    # one-look plan read in the long layout.
    plan = seqtest.design(alpha=0.05, sides=2, power=0.9, looks=1)
    frame = pd.DataFrame([("bundle", 12_100, 1330), ("control", 12_000, 1210)],
                         columns=["arm", "users", "conversions"]).assign(look=1)
    an = seqtest.analyze(plan, looks_from_frame(frame, "binary"), metric="binary",
                         max_n=24_100)
    ref = sm_proportion.test_proportions_2indep(1330, 12_100, 1210, 12_000, method="score",
                                                compare="diff", correction=False)
    look = an.looks[0]
    assert look.test_estimate / look.se == pytest.approx(ref.statistic, rel=1e-9)
    assert an.final.p_value == pytest.approx(ref.pvalue, rel=1e-2)


def test_many_arms_are_read_and_refused_by_the_two_arm_analysis():
    # one control and several treatments: the reader keeps them all (for the plans of
    # several treatments to come); the two-arm analysis refuses rather than compare one
    # treatment as if it were alone
    rows = []
    for k in (1, 2):
        for j, arm in enumerate(("control", "text_a", "text_b", "text_c")):
            rows.append((k, arm, 1000 * k, 100 * k + 5 * j))
    frame = pd.DataFrame(rows, columns=["look", "arm", "n", "successes"])
    table = read_arm_looks(frame, "binary")
    assert table.arms == ("control", "text_a", "text_b", "text_c")
    assert table.looks[1]["text_c"] == {"n": 2000, "successes": 215}
    with pytest.raises(LookDataError) as exc:
        table.two_arm()
    msg = str(exc.value)
    assert "4 arms (control, text_a, text_b, text_c)" in msg
    assert "analyse the table with an experiment plan" in msg
    assert "family-wise error" in msg
    with pytest.raises(LookDataError, match="4 arms"):
        seqtest.analyze(seqtest.design(**PLAN_BINARY), frame)


@pytest.mark.parametrize("edit, where, message", [
    (lambda f: f.drop(index=3), (2, "rank_v1", None), "no row for this arm at this look"),
    (lambda f: pd.concat([f, f.iloc[[2]]]), (2, "control", None), "data rows 3 and 7 both"),
    (lambda f: f.assign(look=f["look"].replace({2: 4, 3: 5})), (2, None, "look"),
     "look 2 has no rows"),
    (lambda f: f.assign(look=f["look"] * 1.5), (None, None, "look"), "holds 1.5"),
    (lambda f: f.assign(arm=f["arm"].where(f.index != 4, None)), (None, None, "arm"),
     "data row 5: column 'arm' is empty"),
    (lambda f: f.assign(successes=f["successes"].where(f.index != 5, None)),
     (3, "rank_v1", "successes"), "column 'successes' is empty"),
    (lambda f: f.assign(n=f["n"].astype(object).where(f.index != 2, "2,000")),
     (2, "control", "n"), "holds '2,000', which is not a number"),
    (lambda f: f.assign(n=f["n"].where(f.index != 4, 900)), (3, "control", "n"),
     "below 2000 at look 2"),
    (lambda f: f.drop(columns="look"), (None, None, "look"), "needs a look column"),
    (lambda f: f.drop(columns="look").assign(date=["03/08/2026"] * 6), (None, None, "date"),
     "year first"),
    (lambda f: f.assign(arm=f["arm"].replace("rank_v1", "Control")), (None, "control", None),
     "differ only in letter case"),
])
def test_long_layout_errors_name_the_look_arm_and_column(edit, where, message):
    frame = edit(_long_frame(treatment="rank_v1")).reset_index(drop=True)
    with pytest.raises(LookDataError) as exc:
        read_arm_looks(frame, "binary")
    assert message in str(exc.value)
    assert (exc.value.look, exc.value.arm, exc.value.field) == where


def test_a_single_arm_is_refused():
    frame = _long_frame().query("arm == 'control'")
    with pytest.raises(LookDataError, match="only one arm"):
        read_arm_looks(frame, "binary")


def test_totals_of_another_kind_are_refused_naming_the_column():
    with pytest.raises(LookDataError) as exc:
        read_arm_looks(_long_frame(), "rate")
    assert "column 'n' gives n, which is not a total of a rate metric" in str(exc.value)
    frame = _long_frame().drop(columns="successes")
    with pytest.raises(LookDataError) as exc:
        read_arm_looks(frame, "binary")
    assert "missing column successes; expected look, arm, n, successes" in str(exc.value)


def test_cells_from_a_database_become_plain_numbers():
    # numeric columns of a database arrive as Decimal (PostgreSQL SUM over bigint)
    from decimal import Decimal
    frame = _long_frame().astype(object)
    frame["successes"] = [Decimal(int(v)) for v in frame["successes"]]
    frame["n"] = [Decimal(f"{int(v)}.0") for v in frame["n"]]
    looks = looks_from_frame(frame, "binary")
    assert looks == BINARY_LOOKS
    assert all(type(v) is int for look in looks for arm in look.values() for v in arm.values())


def test_column_mapping_options():
    assert column_mapping(["visitors a=control.n", "x=y=-", "day=look"]) == {
        "visitors a": "control.n", "x=y": None, "day": "look"}
    for bad in (["visitors"], ["=control.n"], ["a="]):
        with pytest.raises(ValueError, match="--column: got"):
            column_mapping(bad)
    with pytest.raises(ValueError, match="twice"):
        column_mapping(["a=control.n", "a=control.successes"])


def test_treatments_keep_the_data_s_order_whatever_the_mapping():
    frame = pd.DataFrame({"control_n": [10], "control_successes": [1], "b_n": [10],
                          "b_successes": [2], "clicks_c": [10], "buys_c": [3]})
    table = read_arm_looks(frame, "binary", columns={"clicks_c": "c_arm.n",
                                                     "buys_c": "c_arm.successes"})
    assert table.arms == ("control", "b", "c_arm")
