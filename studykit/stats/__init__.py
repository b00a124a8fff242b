"""Pure numerical core: numpy arrays in, frozen results out.

Nothing in here imports pandas, widgets or plotting libraries.

The public functions, result classes and constants of every module are re-exported here, so a
notebook needs one import::

    >>> from studykit.stats import capability, phase1, control_chart
    >>> res = capability([9.8, 10.1, 10.0, 9.9, 10.2, 10.0, 9.9, 10.1], lsl=9.0, usl=11.0)
    >>> round(res.pp, 3)
    2.546

Each module's ``__all__`` is re-exported whole (``from module import *``); from ``charts``,
``constants`` and ``normality`` only the names imported below (their other public names are
helpers shared inside this package). ``__all__`` here lists the package's names for type checkers;
``tests/test_results.py`` checks that it holds exactly the names imported.

Two functions carry the name of their module: ``studykit.stats.capability`` and
``studykit.stats.phase1`` are the functions here. The modules themselves are imported by their
full name (``from studykit.stats.capability import judge``), never as attributes of this package.
"""

from __future__ import annotations

from studykit.stats.lazy import import_scipy_special as _import_scipy_special

_import_scipy_special()  # first, without numpy's unused submodules (its docstring)

from studykit.stats.attribute import *
from studykit.stats.capability import *
from studykit.stats.charts import (
    ATTRIBUTE_KINDS,
    AUTO_R_MAX_SIZE,
    DISPERSION_RULES,
    VARIABLE_KINDS,
    ChartSeries,
    ControlChart,
    OverdispersionCheck,
    c_chart,
    control_chart,
    evaluate_series,
    imr_chart,
    np_chart,
    p_chart,
    u_chart,
    xbar_r_chart,
    xbar_s_chart,
)
from studykit.stats.constants import MAX_SUBGROUP_SIZE, ChartConstants, c4, chart_constants, d2, d3
from studykit.stats.fit import *
from studykit.stats.gauge import *
from studykit.stats.gauge_type1 import *
from studykit.stats.measurement_error import *
from studykit.stats.normality import (
    PLOTTING_POSITIONS,
    AndersonDarlingResult,
    ProbabilityPlot,
    ShapiroWilkResult,
    anderson_darling,
    plotting_positions,
    probability_plot,
    shapiro_wilk,
)
from studykit.stats.order import *
from studykit.stats.phase1 import *
from studykit.stats.phase2 import *
from studykit.stats.planning import *
from studykit.stats.position import *
from studykit.stats.result import *
from studykit.stats.rules import *
from studykit.stats.tolerance import *
from studykit.stats.transform import *
from studykit.stats.verdict import *

__all__ = [
    "ALPHA",
    "anderson_darling",
    "AndersonDarlingResult",
    "AnovaRow",
    "APPRAISER",
    "attribute_capability",
    "ATTRIBUTE_KINDS",
    "attribute_verdict",
    "AttributeCapability",
    "AUTO_R_MAX_SIZE",
    "BOOTSTRAP_FULL_N",
    "box_cox",
    "BoxCoxResult",
    "c4",
    "c_chart",
    "capability",
    "CapabilityResult",
    "chart_constants",
    "chart_digest",
    "ChartConstants",
    "ChartScale",
    "ChartSeries",
    "check_order",
    "control_chart",
    "ControlChart",
    "d2",
    "d3",
    "DEFAULT_CRITERIA",
    "DEFAULT_K_PERCENT",
    "DEFAULT_L_SIGMAS",
    "DEFAULT_MINIMUM",
    "defects_per_unit",
    "DefectsPerUnit",
    "DemonstrationPlan",
    "diagnose",
    "DISPERSION_RULES",
    "distribution_free_confidence",
    "distribution_free_sample_size",
    "effective_df_moving_range",
    "effective_df_range",
    "effective_df_stdev",
    "ELLIPSE_LEVEL",
    "evaluate",
    "evaluate_series",
    "FAMILIES",
    "Family",
    "FEW_READINGS",
    "Finding",
    "fit_all",
    "FitRow",
    "FittedModel",
    "freeze",
    "GAUGE_RR",
    "gauge_rr",
    "gauge_sigma_from_stored",
    "GaugeChartLimits",
    "GaugeResult",
    "GaugeVerdict",
    "imr_chart",
    "INDEX_NAMES",
    "INTERACTION",
    "johnson",
    "JOHNSON_Z_GRID",
    "JohnsonResult",
    "json_float",
    "judge",
    "LIFE_TEST_WORDS",
    "LIMITS_ONLY",
    "MAX_GAUGE_SHARE",
    "MAX_REMOVED_SHARE",
    "MAX_SUBGROUP_SIZE",
    "MeasurementErrorResult",
    "MIN_SUBGROUPS",
    "MIN_VALUES",
    "mls_difference_interval",
    "MLS_METHOD",
    "model_band",
    "ModelBand",
    "MODELS",
    "monitor",
    "MonitorResult",
    "moving_range_sigma",
    "MR_REMOVAL",
    "NELSON",
    "NICE_LAMBDAS",
    "normal_factor_one_sided",
    "normal_factor_two_sided",
    "normal_pass_probability",
    "normal_sample_size",
    "np_chart",
    "OrderCheck",
    "OverdispersionCheck",
    "p_chart",
    "parse_rules",
    "PART",
    "parts_needed",
    "phase1",
    "Phase1Result",
    "Phase2Plan",
    "PLAN_FORMAT",
    "planning_table",
    "PlanTable",
    "PLOTTING_POSITIONS",
    "plotting_positions",
    "position_study",
    "PositionResult",
    "ppm_index",
    "prob_outside_circle",
    "probability_plot",
    "ProbabilityPlot",
    "range_constants",
    "RangeMethodEstimate",
    "Ranking",
    "RANKING_RULE",
    "Removal",
    "remove_gauge_variance",
    "REPEATABILITY",
    "REPRODUCIBILITY",
    "Result",
    "ROW_FIELDS",
    "Rule",
    "RULE_IDS",
    "RULE_SETS",
    "SampleSizePlan",
    "shapiro_wilk",
    "ShapiroWilkResult",
    "short_gauge_study",
    "ShortGaugeResult",
    "SigmaWithoutGauge",
    "Signal",
    "TAIL_PROBABILITY",
    "TAU_SORTED",
    "tolerance_interval",
    "ToleranceInterval",
    "TOTAL",
    "two_sided_confidence",
    "TWO_SIDED_METHODS",
    "u_chart",
    "VARIABLE_KINDS",
    "VarianceComponent",
    "Verdict",
    "WESTERN_ELECTRIC",
    "xbar_r_chart",
    "xbar_s_chart",
    "zero_defect_sample_size",
]
