"""Compensation laws and the gain-error budget they leave (pure numerics, no I/O)."""

from compensator.law.budget import BudgetTerm, GainBudget, MonteCarloSummary, gain_error_at_light_pct, gain_error_budget
from compensator.law.laws import (
    DROP_CORRECTIONS,
    LAW_KINDS,
    CompensationLaw,
    build_law,
    check_law_in_range,
    constant_gain_law,
    constant_overvoltage_law,
)

__all__ = [
    "BudgetTerm", "GainBudget", "MonteCarloSummary", "gain_error_at_light_pct", "gain_error_budget",
    "DROP_CORRECTIONS", "LAW_KINDS", "CompensationLaw", "build_law", "check_law_in_range", "constant_gain_law",
    "constant_overvoltage_law",
]
