"""Pure monitoring statistics: reference model, limits, contributions, charts, the lot-by-lot chart, run rules,
ISO 5725-2 precision, PLS/OPLS.

Arrays (or small DataFrames) in, small frozen dataclasses out. Nothing here reads or writes files (model files are
analysis.modelfile's; ReferenceModel only makes and reads their documents); nothing imports the store, the
command line or the dashboard.
"""

from analysis.monitor.charts import (
    CusumChart,
    CusumLimits,
    EwmaChart,
    EwmaLimits,
    IndividualsChart,
    IndividualsLimits,
    XbarSChart,
    XbarSLimits,
    cusum_chart,
    ewma_chart,
    fit_cusum_limits,
    fit_ewma_limits,
    fit_individuals_limits,
    fit_xbar_s_limits,
    individuals_chart,
    xbar_s_chart,
)
from analysis.monitor.contributions import Contributions, band_contributions
from analysis.monitor.levels import (
    BLOCK_STATISTIC,
    GROUP_STATISTICS,
    BlockMeanLimits,
    MeanLimits,
    block_limits_from_model,
    fit_block_limits,
    fit_mean_limits,
    group_limits_from_model,
)
from analysis.monitor.limits import (
    ControlConstants,
    control_constants,
    spe_limit_box,
    spe_limit_jackson_mudholkar,
    t2_limit_new,
    t2_limit_reference,
)
from analysis.monitor.lotchart import MIN_LIMIT_POINTS, RULE_SETS, LotChart, lot_chart
from analysis.monitor.model import (
    FORMAT_NAME,
    FORMAT_VERSION,
    CrossValidationCurve,
    MonitoringResult,
    ReferenceModel,
)
from analysis.monitor.pls import OPLS, PLS1, CrossValidationResult, cross_validate
from analysis.monitor.polish import MedianPolish, median_polish, polish_frame
from analysis.monitor.precision import Precision, precision_from_groups
from analysis.monitor.rules import NELSON, RULES, WESTERN_ELECTRIC, RuleViolation, check_rules

__all__ = [
    # limits
    "t2_limit_new", "t2_limit_reference", "spe_limit_jackson_mudholkar", "spe_limit_box",
    "ControlConstants", "control_constants",
    # reference model
    "ReferenceModel", "MonitoringResult", "CrossValidationCurve", "FORMAT_NAME", "FORMAT_VERSION",
    "Contributions", "band_contributions",
    # charts
    "IndividualsLimits", "IndividualsChart", "fit_individuals_limits", "individuals_chart",
    "XbarSLimits", "XbarSChart", "fit_xbar_s_limits", "xbar_s_chart",
    "EwmaLimits", "EwmaChart", "fit_ewma_limits", "ewma_chart",
    "CusumLimits", "CusumChart", "fit_cusum_limits", "cusum_chart",
    # the lot-by-lot chart, precision across rigs
    "LotChart", "lot_chart", "RULE_SETS", "MIN_LIMIT_POINTS", "Precision", "precision_from_groups",
    # group means (units), robust two-way decomposition
    "MeanLimits", "fit_mean_limits", "group_limits_from_model", "GROUP_STATISTICS",
    "BlockMeanLimits", "fit_block_limits", "block_limits_from_model", "BLOCK_STATISTIC",
    "MedianPolish", "median_polish", "polish_frame",
    # run rules
    "RuleViolation", "RULES", "WESTERN_ELECTRIC", "NELSON", "check_rules",
    # regression
    "PLS1", "OPLS", "CrossValidationResult", "cross_validate",
]
