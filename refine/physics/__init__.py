"""Transmission media.

The narrow interface: every medium provides, for a frequency array ``f`` in hertz (and, for
strip media, a strip width in metres), the complex propagation constant ``gamma`` (1/m) and the
characteristic impedance ``z_c`` (ohm) via ``line_properties``. Everything else — line ABCD,
cascades, S-parameters — is built once on top of that in :mod:`refine.circuit.cascade`.
"""

from refine.physics.ideal import IdealTEM

__all__ = ["IdealTEM"]
