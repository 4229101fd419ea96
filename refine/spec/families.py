"""The passband responses refine designs and the orders it supports."""

FAMILIES: tuple[str, ...] = ("chebyshev", "butterworth")
MAX_ORDER = 15
