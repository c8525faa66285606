"""Loss budget of a tap: what NEC leaves out (proximity effect) and the Q that follows.

NEC's wire-conductivity load models skin effect only. In closely wound turns the current crowds
towards the neighbouring wires and the loss rises by the proximity factor R_p/R_0 of G. S. Smith
(1972): R_ohm = R_skin·(1 + R_p/R_0), with R_p/R_0 from the 2-D problem of N parallel wires
(:func:`simloop.reference.proximity_factor_smith1972`). A stacked winding's sides are such a row
of wires along the axis, a flat spiral's sides a row in its plane; both use c/a = pitch/(2a).

For tap i only its n_i active turns carry current at low frequency, so its factor is that of
n_i wires; the series resistance shared by taps i and j (their common turns) takes the factor of
the smaller tap. Smith's factor is the skin-effect limit (a/δ ≫ 1); for 20 AWG at 530 kHz
a/δ ≈ 4.5, so the correction is a slight overestimate at the bottom of the band.
"""

from __future__ import annotations

import numpy as np

from simloop import reference
from simloop.geometry import WINDING, LoopGeometry


def proximity_factors(geom: LoopGeometry) -> np.ndarray:
    """R_p/R_0 for each tap's active turns, shape (k,). [-]"""
    spacing_ratio = geom.pitch_m / (2 * geom.wire_radius_m)
    return np.array([reference.proximity_factor_smith1972(n, spacing_ratio) if n > 1 else 0.0
                     for n in geom.tap_turns])


def winding_length_to_turn(geom: LoopGeometry, turns: int) -> float:
    """Wire length of the first ``turns`` turns of the winding. [m]"""
    kinds = np.array(geom.kinds)
    sel = (kinds == WINDING) & (geom.turn < turns)
    return float(geom.lengths_m[sel].sum())


def proximity_resistance(geom: LoopGeometry, frequency_hz, resistivity_ohm_m: float | None) -> np.ndarray:
    """Series resistance that the proximity effect adds to the MoM model, shape (n, k, k). [Ω]

    Element (i, j): the skin-effect resistance of the turns taps i and j share, times the proximity
    factor of the smaller of the two taps. Zero for a lossless wire.
    """
    f = np.atleast_1d(np.asarray(frequency_hz, dtype=float))
    k = len(geom.tap_turns)
    out = np.zeros((f.size, k, k))
    if resistivity_ohm_m is None:
        return out
    per_m = reference.resistance_per_length_round_wire(geom.wire_radius_m, f, resistivity_ohm_m)
    factors = proximity_factors(geom)
    for i in range(k):
        for j in range(k):
            low = min(i, j)  # taps are in increasing order of turns
            length = winding_length_to_turn(geom, geom.tap_turns[low])
            out[:, i, j] = factors[low] * length * per_m
    return out
