"""Element count of a reflecting panel: how many unit cells of a given pitch fit on it.

The gain model uses the panel area (:mod:`siting.radio.surface`); the element count is reported for
information (the survey list, the report) and computed here once for the whole package.

References
----------
.. [1] E. Björnson, Ö. Özdogan, E. G. Larsson, "Reconfigurable Intelligent Surfaces: Three Myths and Two
   Critical Questions", IEEE Communications Magazine 58(12), 2020, arXiv:2006.03377 (a surface of N = L_x L_y
   elements of side d_x, d_y; a rectangular grid).
"""

from __future__ import annotations

import numpy as np

from ..constants import ELEMENT_COUNT_RTOL, SPEED_OF_LIGHT_M_S
from ._checks import as_float


def element_pitch_m(freq_hz, pitch_wavelengths):
    """Element pitch [m] of ``pitch_wavelengths`` wavelengths at ``freq_hz``: p = s c / f.

    Parameters
    ----------
    freq_hz : float or array
        Carrier frequency [Hz], > 0.
    pitch_wavelengths : float or array
        Element spacing in wavelengths, > 0 (half a wavelength is the usual design).

    Returns
    -------
    float or array
        Pitch [m]; scalar in, scalar out.
    """
    f = as_float("freq_hz", freq_hz, min_value=0.0, strict=True)
    s = as_float("pitch_wavelengths", pitch_wavelengths, min_value=0.0, strict=True)
    out = s * SPEED_OF_LIGHT_M_S / f  # wavelength = c / f
    return float(out) if np.ndim(out) == 0 else out


def element_count(width_m, height_m, pitch_m):
    """Elements on a ``width_m`` x ``height_m`` panel at ``pitch_m``: N = floor(w/p) floor(h/p)  [1].

    A relative tolerance (:data:`siting.constants.ELEMENT_COUNT_RTOL`) keeps exact multiples (0.3 m at 0.01 m
    pitch: 30 x 30) from losing a row to floating-point rounding.

    Parameters
    ----------
    width_m, height_m : float or array
        Panel sides [m], >= 0.
    pitch_m : float or array
        Element pitch [m], > 0 (see :func:`element_pitch_m`).

    Returns
    -------
    int or numpy.ndarray of int64
        Element count; scalar in, scalar out.
    """
    p = as_float("pitch_m", pitch_m, min_value=0.0, strict=True)
    w = as_float("width_m", width_m, min_value=0.0) / p
    h = as_float("height_m", height_m, min_value=0.0) / p
    n = (np.floor(w * (1 + ELEMENT_COUNT_RTOL)) * np.floor(h * (1 + ELEMENT_COUNT_RTOL))).astype(np.int64)  # [1]
    return int(n) if np.ndim(n) == 0 else n
