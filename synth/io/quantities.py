"""The quantities a drive record can hold, their units and their column names (the one units table).

Kept free of numpy so the generator, the file formats and the command line
can all import it cheaply.

References
----------
SI units (BIPM SI Brochure, 9th ed.); g is the standard acceleration of
gravity, 9.80665 m/s^2 (CGPM 1901).
"""

from __future__ import annotations

#: Unit of each quantity.
QUANTITY_UNITS = {"acceleration": "g", "velocity": "m/s", "displacement": "m"}

#: Column name (with unit) of each quantity in csv headers and sidecars.
COLUMN_NAMES = {"acceleration": "acceleration_g", "velocity": "velocity_m_s", "displacement": "displacement_m"}

__all__ = ["COLUMN_NAMES", "QUANTITY_UNITS"]
