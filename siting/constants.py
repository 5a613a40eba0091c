"""Constants shared by the whole package, each defined once.

Import them from here (``from siting.constants import SPEED_OF_LIGHT_M_S``); ``siting.radio`` re-exports the
physical ones for its own callers.
"""

from __future__ import annotations

#: Speed of light in vacuum [m/s]; exact, it defines the metre (BIPM, "The International System of Units (SI)",
#: 9th edition, 2019, section 2.3.1, Table 1).
SPEED_OF_LIGHT_M_S: float = 299_792_458.0

#: Relative tolerance of the element count: a panel side that is an exact multiple of the pitch (0.3 m at
#: 0.01 m) must not lose a row to floating-point rounding (common practice).
ELEMENT_COUNT_RTOL: float = 1e-9

__all__ = ["ELEMENT_COUNT_RTOL", "SPEED_OF_LIGHT_M_S"]
