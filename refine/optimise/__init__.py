"""Refinement: the closed-form seed, the one minimax entry on nlopt, the one design space
(variables, fab-rule bounds, mirror ties, grid snapping) and the refiner."""
