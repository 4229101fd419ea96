"""refine — design end-coupled (series-gap) half-wave line bandpass filters that meet a
ripple/rejection mask under a fabrication shop's rules.

The flow is one direction: problem -> prototype -> synthesis -> realise -> cascade -> mask ->
refiner -> outputs. See README.md for the job and DEVELOPERS.md for the layout.
"""

__version__ = "0.1.0"

from .problem import Problem, ProblemError, load_problem

__all__ = ["Problem", "ProblemError", "__version__", "load_problem"]
