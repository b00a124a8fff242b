"""`studykit monitor`: new data against limits frozen from a study (phase II)."""

from __future__ import annotations

import json

from studykit.cli import main

# NIST/SEMATECH e-Handbook 6.3.2.2 individuals example: UCL 55.8024, LCL 45.8176 with the exact
# d2 (tests/reference/check_values.md)
NIST_IMR = [49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1]


def _study(tmp_path):
    data = tmp_path / "phase1.csv"
    data.write_text(
        "sample,depth [mm]\n" + "".join(f"{i + 1},{v}\n" for i, v in enumerate(NIST_IMR))
    )
    specs = tmp_path / "specs.csv"
    specs.write_text("characteristic,unit,lsl,usl\ndepth,mm,40,60\n")
    study = tmp_path / "s.study"
    assert (
        main(
            [
                "study",
                "new",
                str(study),
                "--data",
                str(data),
                "--specs",
                str(specs),
                "--who",
                "T. Test",
            ]
        )
        == 0
    )
    return study


def test_monitor_flags_a_value_beyond_the_frozen_ucl(tmp_path, capsys):
    study = _study(tmp_path)
    new = tmp_path / "new.csv"
    # 55.9 lies above the frozen UCL 55.8024; 55.7 lies below it (NIST 6.3.2.2 limits)
    new.write_text("sample,depth [mm]\n1,50.2\n2,55.7\n3,55.9\n4,50.0\n")
    plan = tmp_path / "plan.json"
    capsys.readouterr()
    rc = main(
        [
            "monitor",
            str(new),
            "--study",
            str(study),
            "-c",
            "depth",
            "--save-plan",
            str(plan),
            "--json",
        ]
    )
    out = json.loads(capsys.readouterr().out)
    assert rc == 1 and out["in_control"] is False
    assert out["first_signal"] == "3"
    assert [s["subgroups"] for s in out["signals"] if s["rule"] == "beyond_limits"] == [["3"]]
    # the saved plan carries the frozen limits and gives the same answer on its own
    frozen = json.loads(plan.read_text())
    assert abs(frozen["location_ucl"] - 55.8024) < 5e-5
    rc2 = main(["monitor", str(new), "--plan", str(plan), "--json"])
    assert rc2 == 1 and json.loads(capsys.readouterr().out)["first_signal"] == "3"


def test_monitor_in_control_exits_0(tmp_path, capsys):
    study = _study(tmp_path)
    new = tmp_path / "new.csv"
    new.write_text("sample,depth [mm]\n1,50.2\n2,51.0\n3,49.9\n")
    assert main(["monitor", str(new), "--study", str(study), "-c", "depth"]) == 0
    assert "in control" in capsys.readouterr().out


def test_monitor_bad_plan_file_is_a_clear_error(tmp_path, capsys):
    bad = tmp_path / "plan.json"
    bad.write_text("{not json")
    new = tmp_path / "new.csv"
    new.write_text("sample,depth\n1,1\n2,2\n")
    assert main(["monitor", str(new), "--plan", str(bad)]) == 2
    err = capsys.readouterr().err
    assert "phase-II plan" in err and "plan.json" in err


def test_monitor_names_the_moving_range_chart_and_both_readings(tmp_path, capsys):
    # Frozen NIST/SEMATECH e-Handbook 6.3.2.2 limits: moving-range UCL = D4 MR-bar = 3.267 x
    # 1.8778 = 6.1338 (the doctest of studykit.stats.charts.control_chart), individuals limits
    # 45.8176 / 55.8024. New readings 54.5 then 47.0: both inside the individuals limits, their
    # moving range 7.5 is above 6.1338, so the dispersion chart signals at the pair (2, 3).
    study = _study(tmp_path)
    new = tmp_path / "new.csv"
    new.write_text("sample,depth [mm]\n1,50.0\n2,54.5\n3,47.0\n4,50.1\n")
    capsys.readouterr()
    rc = main(["monitor", str(new), "--study", str(study), "-c", "depth", "--json"])
    out = json.loads(capsys.readouterr().out)
    assert rc == 1
    (sig,) = out["signals"]
    assert sig["chart"] == "dispersion" and sig["statistic"] == "moving_range"
    assert sig["readings"] == ["2", "3"] and sig["subgroups"] == ["3"]
    assert "moving range of readings 2 and 3" in sig["text"]
    assert "7.5" in sig["text"] and "6.134" in sig["text"]
    # the text report says the same, naming the chart (never "point 3 above ..." alone)
    assert main(["monitor", str(new), "--study", str(study), "-c", "depth"]) == 1
    text = capsys.readouterr().out
    assert "moving-range chart: moving range of readings 2 and 3 (7.5) above the upper" in text


def test_monitor_location_signal_names_its_chart(tmp_path, capsys):
    study = _study(tmp_path)
    new = tmp_path / "new.csv"
    new.write_text("sample,depth [mm]\n1,50.2\n2,55.7\n3,55.9\n4,55.8\n")
    capsys.readouterr()
    main(["monitor", str(new), "--study", str(study), "-c", "depth", "--json"])
    out = json.loads(capsys.readouterr().out)
    beyond = [s for s in out["signals"] if s["rule"] == "beyond_limits"]
    assert beyond[0]["chart"] == "location" and beyond[0]["readings"] == ["3"]
    assert beyond[0]["text"].startswith("individuals chart: ")
