"""The fitted-model list (issue 15 item 3): each family once, "allow a threshold" as an option
whose effect is shown, in the workbook's shape step and the PDF; the JSON keeps its rows and ids.

Reference numbers: AIC, the Anderson-Darling p-value and the likelihood-ratio p-value are the
ranking's own (studykit.stats.fit, checked against scipy in tests/test_fit.py); here only the
regrouping and the words are checked, and the likelihood-ratio statistic is recomputed with
scipy.stats.chi2 (1 degree of freedom on 2 (loglik3 - loglik2); Meeker & Escobar 1998,
section 8.3 (likelihood-ratio tests), from memory).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from test_app_panels import NAME, study_path, wb  # noqa: F401 - fixtures

from studykit.report import model_list
from studykit.stats.fit import fit_all
from studykit.store import StudyFile


@pytest.fixture(scope="module")
def skewed():
    # invented data: a Weibull shifted away from zero, so the threshold variant should win
    return fit_all(np.random.default_rng(1).weibull(2.0, 60) * 3 + 5)


def _fmt(v, d):
    return f"{v:.{d}f}"


def test_each_family_once_with_its_threshold_variant_inside(skewed):
    lines = model_list.family_lines(skewed)
    families = [line.family for line in lines]
    assert len(families) == len(set(families))
    # every ranking row is in exactly one family line
    ids = [r.id for line in lines for r in (line.plain, line.shifted) if r is not None]
    assert sorted(ids) == sorted(r.id for r in skewed.rows)
    weibull = next(line for line in lines if line.family == "weibull")
    assert (weibull.plain.id, weibull.shifted.id) == ("weibull", "weibull3")
    # ranked by each family's better AIC
    best = [
        min(r.aic for r in (line.plain, line.shifted) if r is not None and r.aic is not None)
        for line in lines
    ]
    assert best == sorted(best)


def test_the_effect_of_the_threshold_is_said_in_words(skewed):
    lines = {line.family: line for line in model_list.family_lines(skewed)}
    w = lines["weibull"]
    d = w.plain.aic - w.shifted.aic
    assert d > 0
    text = model_list.threshold_effect(w, _fmt)
    assert f"AIC lower by {d:.1f}" in text
    lr = 2 * (w.shifted.loglik - w.plain.loglik)
    p = stats.chi2.sf(lr, 1)
    assert w.shifted.lrt_p_value == pytest.approx(p, rel=1e-9)
    assert ("improves the fit" in text) is bool(p < 0.05)
    assert model_list.threshold_effect(lines["normal"], _fmt) == "no threshold variant"


def test_shape_step_lists_each_family_once_and_offers_the_threshold(wb, study_path):  # noqa: F811
    shape = wb.step("shape")
    res = shape.ws.session.result(NAME)
    html = shape.ranking.value
    assert "Threshold allowed" in html and "Effect of allowing a threshold" in html
    assert "Meeker" in html  # the textbook the families come from
    labels = [label for label, _v in shape.model.options]
    assert not any("3-parameter" in label or "2-parameter" in label for label in labels)
    assert len(labels) == len(set(labels))
    variants = {
        line.family: line.shifted.id
        for line in model_list.family_lines(res.ranking)
        if line.shifted is not None and not line.shifted.error
    }
    family, variant = next(iter(variants.items()))
    shape.model.value = family
    assert not shape.threshold.disabled
    shape.threshold.value = True
    assert shape.chosen() == variant
    assert "With the choice" in shape.effect.value
    shape.reason.value = "bounded below by the fixture"
    shape.save.click()
    assert StudyFile(study_path).load().model_for(NAME) == variant  # the JSON id, unchanged
    shape.model.value = "normal"
    assert shape.threshold.disabled and shape.chosen() == "normal"


def test_json_rows_and_ids_are_unchanged(skewed):
    rows = skewed.to_dict()["rows"] if isinstance(skewed.to_dict(), dict) else None
    assert rows is not None and {r["id"] for r in rows} >= {
        "weibull",
        "weibull3",
        "exponential2",
        "lognormal3",
    }
