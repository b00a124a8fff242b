"""The model band is computed on the verdict's own basis (issue 15, item 7).

With the default criterion (the lower 95% confidence bound of Ppk at least 1.67, common
practice, no source) the band compares each plausible model's lower bound with the threshold,
so it warns "the verdict depends on the model" only when a plausible model would change the
verdict itself. The data are the committed demo study (invented, seeded: demo_data/README.md);
the bound of the normal model is checked against Bissell's formula evaluated here
(A. F. Bissell, "How reliable is your capability index?", Applied Statistics 39 (1990)
331-340, with scipy.stats.norm.ppf for the quantile), the others against the documented
transfer of the chosen model's margin (studykit.analysis, ``_band_bounds``).
"""

from __future__ import annotations

import math
from pathlib import Path

import pytest
from scipy import stats

from studykit.analysis import (
    STUDY_OPTIONS_PHASE1,
    AnalysisOptions,
    analyze_characteristic,
    analyze_study,
    read_study_measurements,
    recorded_exclusions,
)
from studykit.errors import StudyInputError
from studykit.stats.capability import model_band
from studykit.store import StudyFile
from studykit.study import Criteria

STUDY = Path(__file__).resolve().parents[1] / "demo_data" / "pump_housing_pilot.study"


@pytest.fixture(scope="module")
def study():
    return StudyFile(STUDY).load()


def _on_estimates(study, name):
    """The same study of ``name`` judged on the estimate instead of the lower bound."""
    options = AnalysisOptions(
        phase1=STUDY_OPTIONS_PHASE1,
        rank_models=True,
        chart=study.chart_for(name),
        model=study.model_for(name),
    )
    return analyze_characteristic(
        read_study_measurements(study).get(name),
        study.characteristic(name),
        criteria=Criteria(index="ppk", threshold=1.67, basis="estimate", confidence=0.95),
        exclusions=recorded_exclusions(study, name),
        options=options,
    )


def _bissell_lower(ppk, n, level):
    # Bissell (1990), eq. for the lower bound of Cpk/Ppk: index - z sqrt(1/(9n) + index^2/(2(n-1)))
    z = stats.norm.ppf(level)
    return ppk - z * math.sqrt(1 / (9 * n) + ppk**2 / (2 * (n - 1)))


def test_estimates_straddle_but_every_bound_fails_no_warning(study):
    res = analyze_study(study, "pull_off_force")
    band = res.model_band
    assert res.criteria["basis"] == "lower_bound" and res.verdict.meets is False
    assert band.basis == "lower_bound" and band.quantity == "lower 95% bound"
    # on the estimates the models disagree (normal meets 1.67, the others do not) ...
    est = _on_estimates(study, "pull_off_force").model_band
    assert est.basis == "estimate" and est.verdict_changes
    assert est.meeting and est.failing
    # ... but no model's lower bound reaches 1.67: the verdict does not depend on the model
    assert band.meeting == [] and not band.verdict_changes and band.warning is None
    assert band.high < 1.67
    assert band.to_dict()["basis"] == "lower_bound"


def test_bounds_straddle_warning_names_the_basis(study):
    res = analyze_study(study, "flange_thickness")
    band = res.model_band
    assert band.basis == "lower_bound" and band.verdict_changes
    assert band.meeting and band.failing and band.low < 1.67 <= band.high
    assert "depends on the model" in band.warning and "on the lower 95% bound" in band.warning
    # the chosen model's entry is the verdict's own bound; normal theory's is Bissell's
    assert res.model.name in band.meeting
    est = _on_estimates(study, "flange_thickness").model_band
    assert set(est.meeting + est.failing) == set(band.meeting + band.failing)
    assert res.model.name == "normal"
    assert band.low <= res.verdict.lower_bound <= band.high


def test_bounds_under_other_models_follow_the_documented_transfer(study):
    res = analyze_study(study, "pull_off_force")
    est = _on_estimates(study, "pull_off_force").model_band
    band = res.model_band
    # pull-off force: the chosen model is normal, the highest estimate and bound are normal's
    assert res.model.name == "normal"
    assert est.high_models == band.high_models == ["normal"]
    # the chosen (normal) model's entry is the verdict's own bound, which is Bissell's
    assert band.high == res.verdict.lower_bound
    assert band.high == pytest.approx(_bissell_lower(est.high, res.n, 0.95), rel=1e-12)
    # a fitted model other than the chosen one: T_m - (T_c - L_c) |T_m / T_c|
    t_c, l_c = res.verdict.estimate, res.verdict.lower_bound
    scale = (t_c - l_c) / abs(t_c)
    assert est.low_models == band.low_models == ["sev"]
    assert band.low == pytest.approx(est.low - scale * abs(est.low), rel=1e-12)
    assert band.low < est.low and band.high < est.high


def test_model_band_basis_checked_and_level_needed():
    b = model_band({"normal": 1.60, "lognormal": 1.70}, 1.67, basis="lower_bound", level=0.9)
    assert b.quantity == "lower 90% bound" and "on the lower 90% bound" in b.warning
    assert b.to_dict()["level"] == 0.9
    e = model_band({"normal": 1.60, "lognormal": 1.70}, 1.67)
    assert e.quantity == "estimate" and e.to_dict()["level"] is None
    with pytest.raises(StudyInputError, match="basis"):
        model_band({"a": 1.0}, 1.0, basis="median")
    with pytest.raises(StudyInputError, match="level"):
        model_band({"a": 1.0}, 1.0, basis="lower_bound")


def test_model_finding_leaves_the_flip_to_the_band(study):
    # face runout: a fitted model; a threshold between its Ppk and normal theory's makes the
    # two estimates fall on either side, which alone is not a plausible model changing the
    # verdict (the band, on the verdict's basis, says that)
    from studykit.stats.capability import diagnose

    res = analyze_study(study, "face_runout")
    cap = res.capability
    assert cap.method != "normal"
    mine, theirs = cap.ppk, cap.alternatives["normal"]["ppk"]
    between = (mine + theirs) / 2
    alone = [f for f in diagnose(cap, threshold=between) if f.code == "model_matters"]
    assert alone and "The verdict depends on the model chosen." in alone[0].text
    banded = diagnose(cap, threshold=between, band_decides=True)
    matters = [f for f in banded if f.code == "model_matters"]
    assert matters and "depends on the model" not in matters[0].text
