"""The circuit solver against NEC-2 (PyNEC 2.3.4, an independent full-wave MoM) on loops where NEC
is trusted from well below to above the self-resonance: coarse pitch, thick wire, segments within
2 × pitch and far above the 7e-5 λ floor at every frequency compared.

Acceptance (issue "Trusted impedance for the loops people actually build"): |Z| within 2 % up to
0.8 × SRF and SRF within 3 %. The remaining difference is expected: NEC reads the inductance up to
1.2 % low at segment/pitch 1.67 (measured pitch bias, simloop.impedance.pitch_bias) and the circuit
has no retardation, an error growing as (kD)² towards the resonance.

Sources: NEC-2 as PyNEC 2.3.4 (an outside full-wave solver, docs/notes/pynec.md); Ruehli 1974
(PEEC, docs/references.md §12, §19).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import brentq

from simloop import circuit
from simloop.impedance import environment_from_spec, prepare
from simloop.solve import solve_ports
from simloop.spec import loads

LOOPS = {
    "stacked-4t-15mm-14awg": """
        name = "stacked"
        [frame]
        width = "0.5 m"
        height = "0.4 m"
        [winding]
        style = "stacked"
        turns = 4
        pitch = "15 mm"
        [wire]
        gauge = "14 AWG"
        [taps]
        turns = [4]
        [leads]
        offset = "6 cm"
        [sweep]
        start = "520 kHz"
        stop = "1710 kHz"
        points = 3
        [mesh]
        quality = "standard"
    """,
    "spiral-5t-20mm-12awg": """
        name = "spiral"
        [frame]
        width = "0.5 m"
        height = "0.5 m"
        [winding]
        style = "spiral"
        turns = 5
        pitch = "20 mm"
        [wire]
        gauge = "12 AWG"
        [taps]
        turns = [5]
        [leads]
        offset = "5 cm"
        [sweep]
        start = "520 kHz"
        stop = "1710 kHz"
        points = 3
        [mesh]
        quality = "standard"
    """,
    "stacked-6t-10mm-14awg": """
        name = "six"
        [frame]
        width = "0.6 m"
        height = "0.6 m"
        [winding]
        style = "stacked"
        turns = 6
        pitch = "10 mm"
        [wire]
        gauge = "14 AWG"
        [taps]
        turns = [6]
        [leads]
        offset = "5 cm"
        [sweep]
        start = "520 kHz"
        stop = "1710 kHz"
        points = 3
        [mesh]
        quality = "standard"
    """,
}


def _compare(name):
    import textwrap

    spec = loads(textwrap.dedent(LOOPS[name]))
    _, mesh, _ = prepare(spec)
    env = environment_from_spec(spec)
    model = circuit.build_circuit(mesh, resistivity_ohm_m=env.resistivity_ohm_m, proximity=False)
    srf = model.self_resonance_hz(0, 80e6)
    assert srf is not None
    fractions = np.array([0.3, 0.4, 0.5, 0.6, 0.7, 0.8])
    freqs = fractions * srf
    # NEC trusted at every compared frequency: segments ≥ 7e-5 λ
    assert mesh.floor_frequency_hz() < freqs[0]
    nec = solve_ports(mesh, env, freqs, workers=1)
    ratio = [abs(model.solve(f).z_ohm[0, 0]) / abs(s.z[0, 0]) - 1 for f, s in zip(freqs, nec)]

    def x_nec(f):
        return solve_ports(mesh, env, [f], workers=1)[0].z[0, 0].imag

    srf_nec = brentq(x_nec, 0.97 * srf, 1.03 * srf, xtol=1e-4 * srf)
    return np.array(ratio), srf, srf_nec


@pytest.mark.parametrize("name", ["stacked-4t-15mm-14awg", "spiral-5t-20mm-12awg"])
def test_circuit_agrees_with_nec_up_to_080_srf(name):
    ratio, srf, srf_nec = _compare(name)
    assert np.all(np.abs(ratio) < 0.02), ratio  # issue acceptance: 2 %
    assert srf == pytest.approx(srf_nec, rel=0.03, abs=0)  # issue acceptance: 3 %
    # tighter than the acceptance where NEC's own pitch bias (≤ 1.2 %) dominates: 0.5 × SRF
    assert abs(ratio[2]) < 0.012  # fractions[2] = 0.5


@pytest.mark.slow
def test_circuit_agrees_with_nec_six_turns():
    ratio, srf, srf_nec = _compare("stacked-6t-10mm-14awg")
    assert np.all(np.abs(ratio) < 0.02), ratio
    assert srf == pytest.approx(srf_nec, rel=0.03, abs=0)
