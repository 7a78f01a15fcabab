"""Estimates with confidence intervals from a plan's results.

Pure functions on arrays: no file I/O. One module per estimator:

* :mod:`~fieldplan.estimate.stratified`: per-block and stratified means
* :mod:`~fieldplan.estimate.cluster`: ratio mean over clusters, ICC, design effect
* :mod:`~fieldplan.estimate.systematic`: grid means with SRS and local variance
* :mod:`~fieldplan.estimate.readiness`: probability of reaching a target, trend
* :mod:`~fieldplan.estimate.nextplan`: observed SD/CV/ICC for sizing the next round
* :mod:`~fieldplan.estimate.table`: the estimates table matching a plan's design
"""

from fieldplan.estimate.cluster import (
    ClusterEstimate,
    cluster_mean_from_units,
    icc_anova,
    ratio_mean,
    stratified_ratio_mean,
)
from fieldplan.estimate.intervals import satterthwaite_df, t_interval
from fieldplan.estimate.nextplan import Variability, observed_variability
from fieldplan.estimate.readiness import TrendProjection, prob_reached, project_blocks
from fieldplan.estimate.stratified import StratifiedEstimate, group_estimates, stratified_mean
from fieldplan.estimate.systematic import (
    SystematicEstimate,
    successive_difference_se,
    systematic_mean,
)

__all__ = [
    "ClusterEstimate",
    "StratifiedEstimate",
    "SystematicEstimate",
    "TrendProjection",
    "Variability",
    "cluster_mean_from_units",
    "group_estimates",
    "icc_anova",
    "observed_variability",
    "prob_reached",
    "project_blocks",
    "ratio_mean",
    "satterthwaite_df",
    "stratified_mean",
    "stratified_ratio_mean",
    "successive_difference_se",
    "systematic_mean",
    "t_interval",
]
