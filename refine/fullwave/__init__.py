"""Full-wave check of refine's layouts with the open FDTD engine openEMS.

``verify.check_layout(problem, layout, mesh)`` field-solves a microstrip layout and compares it
with the circuit model; ``spacemap.correct`` runs EM-corrected refinement; ``calibration`` holds
the gap-capacitance fixture and says which closed-form gap model is closer to the field solver
for a geometry. The engine runs in a subprocess (:mod:`refine.fullwave.engine`); nothing here
imports it, and everything but the solves themselves works without it.
"""
