"""Yield under the shop's tolerances (Monte Carlo, sensitivities) and yield centring."""
