"""Physical constants and the tool's own limits, defined once.

Every module takes c, μ0, ε0 and η0 from here (docs/references.md §13 explains the choice).

* c is exact by the SI definition of the metre.
* μ0 = 4π·10⁻⁷ H/m, the pre-2019 exact SI value. CODATA 2018 gives 1.000 000 000 55 × 4π·10⁻⁷
  (5.5·10⁻¹⁰ relative), far below every tolerance here; keeping 4π·10⁻⁷ reproduces the
  [computed] check values of docs/references.md to every printed digit, and it is the value
  nec2++ (the solver behind PyNEC) uses.
* ε0 and η0 follow from μ0 and c, so Maxwell's relations hold exactly between them.

nec2++ itself computes its wavelength with ε0 = 8.854·10⁻¹² F/m, i.e. c_NEC = 1/√(μ0·ε0), which is
1.06·10⁻⁵ above c (measured; docs/references.md §13). :data:`NEC_SPEED_OF_LIGHT_M_S` records it for
comparisons with raw solver output; the tool does not correct for it.

The limits at the end are this tool's choices, not physics; their reasons are in
docs/references.md §13.

References
----------
.. [1] BIPM, *The International System of Units (SI)*, 9th ed., 2019 (c exact; μ0 measured).
.. [2] E. Tiesinga et al., "CODATA recommended values of the fundamental physical constants:
   2018", Rev. Mod. Phys. 93, 025010, 2021.
"""

from __future__ import annotations

import math
from typing import Final

__all__ = [
    "EPSILON0_F_M",
    "ETA0_OHM",
    "F_MAX_HZ",
    "F_MIN_HZ",
    "MAX_SEGMENTS",
    "MU0_H_M",
    "NEC_SPEED_OF_LIGHT_M_S",
    "SPEED_OF_LIGHT_M_S",
]

#: Speed of light in vacuum, exact (SI). [m/s]
SPEED_OF_LIGHT_M_S: Final = 299_792_458.0
#: Magnetic constant, 4π·10⁻⁷ (pre-2019 exact SI value; CODATA 2018 is 5.5e-10 higher). [H/m]
MU0_H_M: Final = 4e-7 * math.pi
#: Electric constant 1/(μ0 c²) = 8.854 187 817e-12 (CODATA 2018: 8.854 187 8128e-12). [F/m]
EPSILON0_F_M: Final = 1.0 / (MU0_H_M * SPEED_OF_LIGHT_M_S**2)
#: Impedance of free space μ0 c = 376.730 313 (CODATA 2018: 376.730 313 668). [Ω]
ETA0_OHM: Final = MU0_H_M * SPEED_OF_LIGHT_M_S
#: The speed of light inside nec2++: 1/√(4π·10⁻⁷ · 8.854·10⁻¹²) (measured with PyNEC 2.3.4,
#: docs/references.md §13). For reading raw solver output only. [m/s]
NEC_SPEED_OF_LIGHT_M_S: Final = 1.0 / math.sqrt(MU0_H_M * 8.854e-12)

#: Lowest and highest frequency the tool models (spec limits; docs/references.md §13). [Hz]
F_MIN_HZ: Final = 10e3
F_MAX_HZ: Final = 30e6
#: Most segments handed to nec2++ in one model: about 40 min and 12.8 GB per frequency at the
#: measured cost law (docs/notes/pynec.md, Speed). [-]
MAX_SEGMENTS: Final = 20000
