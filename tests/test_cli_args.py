"""``analyze -c NAME`` and ``analyze --all`` build their inputs from one module (studykit.cli.args).

The two paths once read the data file with different options (``--subgroup-size`` reached the
reader in one and not the other). The check: every row of ``--all`` carries the same numbers as
the one-characteristic run with the same arguments. Data: an invented one-column file.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from studykit.cli import analyze as analyze_cli
from studykit.cli import args as cli_args
from studykit.cli import batch as batch_cli
from studykit.cli import main


def _run(capsys, argv):
    assert main(argv) == 0
    return capsys.readouterr().out


def _one_column(tmp_path):
    rng = np.random.default_rng(3)
    path = tmp_path / "torque.csv"
    path.write_text("Torque [Nm]\n" + "\n".join(f"{v:.3f}" for v in rng.normal(5, 0.1, 40)) + "\n")
    return path


@pytest.mark.parametrize("extra", [[], ["--subgroup-size", "4"]], ids=["as-read", "size-4"])
def test_all_rows_match_single_runs(capsys, tmp_path, extra):
    path = _one_column(tmp_path)
    limits = ["--lsl", "4.5", "--usl", "5.5"]
    rows = [
        json.loads(line)
        for line in _run(
            capsys, ["analyze", str(path), "--all", "--json", "--jobs", "1", *limits, *extra]
        ).splitlines()
    ]
    assert rows and all(r["index"] == "ppk" for r in rows)
    for row in rows:
        one = json.loads(
            _run(
                capsys,
                ["analyze", str(path), "-c", row["characteristic"], "--json", *limits, *extra],
            )
        )
        assert one["n"] == row["n"]
        assert one["subgroup_size"] == (int(extra[1]) if extra else 1)
        assert one["capability"]["ppk"] == row["estimate"]
        assert one["capability"]["ppk_lower_95"] == row["lower_bound"]


def test_both_commands_use_the_shared_builders():
    # one home: the commands hold no private copy of the argument handling
    for name in (
        "analysis_options",
        "criteria_from_args",
        "spec_from_args",
        "read_file_measurements",
    ):
        assert getattr(analyze_cli, name) is getattr(cli_args, name)
        assert getattr(batch_cli, name) is getattr(cli_args, name)
    for old in ("_options", "_criteria", "_spec"):
        assert not hasattr(analyze_cli, old)


def test_jobs_option_refuses_fewer_than_one(capsys):
    # analyze --jobs and report --jobs share one argparse type (cli/args.jobs_count)
    from studykit.cli import main

    for argv in (
        ["analyze", "x.csv", "--all", "--jobs", "0"],
        ["report", "x.study", "--jobs", "a"],
    ):
        with pytest.raises(SystemExit) as exc:
            main(argv)
        assert exc.value.code == 2
        assert "give a whole number of at least 1" in capsys.readouterr().err
