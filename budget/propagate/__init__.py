"""Propagation of uncertainty: the GUM law (JCGM 100) and the Monte Carlo method (JCGM 101)."""

from .lpu import LinearResult, coverage_factor, propagate_linear
from .mcm import McmResult, McmSettings, monte_carlo
from .validate import Validation, compare_lpu_mcm, numerical_tolerance

__all__ = ["LinearResult", "coverage_factor", "propagate_linear", "McmResult", "McmSettings",
           "monte_carlo", "Validation", "compare_lpu_mcm", "numerical_tolerance"]
