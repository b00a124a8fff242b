"""The model ranking is computed when it is needed or asked for, and never changes the result.

Invented data (seeded) exercise the pipeline only; the expected numbers are those of the same
study computed with the ranking (the route that ranked every family before), so the checks
compare the two routes, not published values.
"""

from __future__ import annotations

import json

import numpy as np

from studykit.analysis import AnalysisOptions, analyze_characteristic
from studykit.data import CharacteristicData
from studykit.study import Characteristic

SPEC = Characteristic("x", lsl=40.0, usl=60.0)


def _normal_data():
    return CharacteristicData("x", None, np.random.default_rng(2026).normal(50.0, 2.0, 125))


def _drop(d, *keys):
    return {k: v for k, v in d.items() if k not in keys}


def test_normal_data_skip_the_ranking_unless_asked():
    data = _normal_data()
    fast = analyze_characteristic(data, SPEC)
    ranked = analyze_characteristic(data, SPEC, options=AnalysisOptions(rank_models=True))
    assert fast.model.name == ranked.model.name == "normal"
    assert fast.ranking is None and fast.model_band is None
    assert ranked.ranking is not None and len(ranked.ranking.rows) == 15
    assert ranked.model_band is not None
    a, b = fast.to_dict(), ranked.to_dict()
    assert "ranking" not in a and "ranking" in b
    assert a["model_band"] is None
    # every other number is the same with and without the ranking
    assert json.dumps(_drop(a, "ranking", "model_band", "options"), sort_keys=True) == json.dumps(
        _drop(b, "ranking", "model_band", "options"), sort_keys=True
    )


def test_rejected_normal_model_still_ranks_every_family():
    x = 10.0 + 3.0 * np.random.default_rng(5).weibull(1.3, 125)  # skewed: AD rejects normal
    res = analyze_characteristic(CharacteristicData("x", None, x), Characteristic("x", usl=30.0))
    assert res.model.name != "normal"
    assert res.ranking is not None and len(res.ranking.rows) == 15
    assert res.model.name in res.ranking.models


def test_cli_rank_models_flag(tmp_path, capsys):
    from studykit.cli import main

    path = tmp_path / "x.csv"
    x = np.random.default_rng(2026).normal(50.0, 2.0, 60)
    path.write_text("x [mm]\n" + "\n".join(f"{v:.4f}" for v in x) + "\n")
    args = ["analyze", str(path), "-c", "x", "--lsl", "40", "--usl", "60", "--json"]
    assert main(args) == 0
    plain = json.loads(capsys.readouterr().out)
    assert main([*args, "--rank-models"]) == 0
    ranked = json.loads(capsys.readouterr().out)
    assert "ranking" not in plain and len(ranked["ranking"]) == 15
    assert plain["capability"] == ranked["capability"]


def test_study_route_always_ranks(capsys):
    # the study route (workbook, report, verify) keeps the ranking, also with a spec override
    from pathlib import Path

    from studykit.cli import main

    study = Path(__file__).resolve().parents[1] / "demo_data" / "pump_housing_pilot.study"
    for extra in ([], ["--usl", "25.1"]):
        args = ["analyze", "--study", str(study), "-c", "bore_diameter", *extra, "--json"]
        assert main(args) == 0
        d = json.loads(capsys.readouterr().out)
        assert d["model"]["name"] == "normal" and len(d["ranking"]) == 15
        assert d["model_band"] is not None
