"""refine — design half-wave line bandpass filters (end-coupled through series gaps, or
parallel-coupled) that meet a ripple/rejection mask under a fabrication shop's rules.

The flow is one direction: problem -> prototype -> synthesis -> realise -> cascade -> mask ->
refiner -> outputs. See README.md for the job and DEVELOPERS.md for the layout.

Python API (what the ``refine`` command does, as plain calls)::

    import refine
    problem = refine.load_problem("problems/microstrip-x-band-alumina-n3.toml")
    seed = refine.seed(problem)              # closed-form design, realised and checked
    result = refine.design(problem, seed=seed)   # refine under the fab rules, verify
    refine.write_outputs(result, seed, "out")    # Touchstone, DXF, SVG, plots, report

    # a problem with [coupling] topology = "parallel-coupled"
    result = refine.design_parallel(problem)   # refine.optimise.parallel.ParallelResult

The public names are loaded on first use (PEP 562), so that ``import refine.cli`` and
``refine --help`` do not pay for the numerical stack.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

from refine.version import VERSION as __version__

if TYPE_CHECKING:
    from refine.optimise.parallel import refine_parallel as design_parallel
    from refine.optimise.refiner import RefineResult, Status
    from refine.optimise.refiner import refine_problem as design
    from refine.optimise.seed import seed
    from refine.outputs.files import write_outputs
    from refine.spec.problem import Problem, ProblemError, load_problem

_WHERE = {
    "Problem": ("refine.spec.problem", "Problem"),
    "ProblemError": ("refine.spec.problem", "ProblemError"),
    "RefineResult": ("refine.optimise.refiner", "RefineResult"),
    "Status": ("refine.optimise.refiner", "Status"),
    "design": ("refine.optimise.refiner", "refine_problem"),
    "design_parallel": ("refine.optimise.parallel", "refine_parallel"),
    "load_problem": ("refine.spec.problem", "load_problem"),
    "seed": ("refine.optimise.seed", "seed"),
    "write_outputs": ("refine.outputs.files", "write_outputs"),
}


def __getattr__(name: str) -> Any:
    if name not in _WHERE:
        raise AttributeError(f"module 'refine' has no attribute {name!r}")
    module, attr = _WHERE[name]
    value = getattr(importlib.import_module(module), attr)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted([*globals(), *_WHERE])


__all__ = [
    "Problem",
    "ProblemError",
    "RefineResult",
    "Status",
    "__version__",
    "design",
    "design_parallel",
    "load_problem",
    "seed",
    "write_outputs",
]
