"""Tuning strategies: each gets an :class:`~.common.Evaluator` and the target, and returns an
:class:`~.common.Outcome` whose figures come from simulation."""

from amploop.strategy.common import Evaluator, Outcome
from amploop.strategy.mapping import tune_by_map
from amploop.strategy.optimizer import tune_by_optimizer
from amploop.strategy.textbook import tune_by_textbook

#: Strategies by name. "optimizer" is for the benchmark only (not on the command line).
STRATEGIES = {"map": tune_by_map, "textbook": tune_by_textbook, "optimizer": tune_by_optimizer}

__all__ = ["STRATEGIES", "Evaluator", "Outcome", "tune_by_map", "tune_by_textbook"]
