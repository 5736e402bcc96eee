"""models stage (see DESIGN.md, "Model"): peer normalisation, isolation-forest trip scores,
vehicle aggregation, drift detection, component attribution, evaluation.

Entry points called by tracktrue/cli.py: run_scoring, ranking_table, format_ranking,
vehicle_report, evaluate. The estimator itself is models.scorer.FleetScorer.
"""

from models.evaluation import evaluate
from models.ranking import format_ranking, ranking_table, vehicle_report
from models.runner import run_scoring
from models.scorer import FleetScorer

__all__ = ["FleetScorer", "evaluate", "format_ranking", "ranking_table", "run_scoring", "vehicle_report"]
