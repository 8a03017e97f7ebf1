"""Tuning strategies: each gets an :class:`~.common.Evaluator` and the target, and returns an
:class:`~.common.Outcome` whose figures come from simulation."""

from .common import Evaluator, Outcome
from .mapping import tune_by_map
from .textbook import tune_by_textbook

STRATEGIES = {"map": tune_by_map, "textbook": tune_by_textbook}

__all__ = ["Evaluator", "Outcome", "STRATEGIES", "tune_by_map", "tune_by_textbook"]
