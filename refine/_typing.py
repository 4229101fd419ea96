"""Type aliases for numerical values (numpy arrays or Python numbers) used across refine."""

from typing import Any, TypeAlias

import numpy as np
from numpy.typing import NDArray

#: a real or complex value or array that arithmetic broadcasts (not a string or a nested list)
Values: TypeAlias = NDArray[Any] | np.number[Any] | float | complex
