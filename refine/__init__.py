"""refine — design end-coupled (series-gap) half-wave line bandpass filters that meet a
ripple/rejection mask under a fabrication shop's rules.

The flow is one direction: problem -> prototype -> synthesis -> realise -> cascade -> mask ->
refiner -> outputs. See README.md for the job and DEVELOPERS.md for the layout.

Python API (what the ``refine`` command does, as plain calls)::

    import refine
    problem = refine.load_problem("problems/microstrip-x-band-alumina-n3.toml")
    seed = refine.seed(problem)              # closed-form design, realised and checked
    result = refine.design(problem, seed=seed)   # refine under the fab rules, verify
    refine.write_outputs(result, seed, "out")    # Touchstone, DXF, SVG, plots, report
"""

from refine.optimise.refiner import RefineResult, Status
from refine.optimise.refiner import refine_problem as design
from refine.optimise.seed import seed
from refine.outputs.files import write_outputs
from refine.spec.problem import Problem, ProblemError, load_problem
from refine.version import VERSION as __version__

__all__ = [
    "Problem",
    "ProblemError",
    "RefineResult",
    "Status",
    "__version__",
    "design",
    "load_problem",
    "seed",
    "write_outputs",
]
