"""Physical constants (SI), CODATA 2022 recommended values.

Held here rather than imported from ``scipy.constants``, whose import costs about 0.2 s at the
start of every command for three numbers; the values are the same as scipy's (CODATA 2022),
and ``tests/test_media.py`` checks that they agree. (Before 0.2.0 the free-space impedance mixed
scipy's μ0 with a CODATA 2018 ε0: a 3e-10 relative difference, now gone.)
"""

from __future__ import annotations

import math

C0 = 299_792_458.0  # m/s, speed of light in vacuum (exact in the SI)
MU0 = 1.25663706127e-6  # H/m, vacuum magnetic permeability (CODATA 2022)
EPS0 = 8.8541878188e-12  # F/m, vacuum electric permittivity (CODATA 2022)
ETA0 = math.sqrt(MU0 / EPS0)  # ohm, free-space wave impedance, 376.73
