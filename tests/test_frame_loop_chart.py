"""The common-practice frame loop's channel chart (geometries/frame-loop.toml: 32 × 26.5 in, 12
turns of 20 AWG at 1/4 in pitch, taps 8/10/12) from the circuit solver: each tap one contiguous
span, the most turns at the bottom of the band, working up (common practice for tapped frame
loops), every channel trusted, and the chart's stated reason for each switch.

Sources: the switch points are checked against the resonance of the tap's L0 and
self-capacitance with the tuner's capacitance, f = 1/(2π√(L0 (C_s + C))) (F. E. Terman, *Radio
Engineers' Handbook*, 1943, sec. 3: a coil with its distributed capacitance resonates as L shunted
by C_s), with L0 and C_s from the sweep itself (computed from the formula); the wire to each tap
against n turns of the frame's perimeter (computed); the ITU-R Radio Regulations art. 5 channel
rasters (itu-1: 531–1602 kHz every 9 kHz, itu-2: 530–1700 kHz every 10 kHz; published); the
switching order is common practice.

The fast variant uses a draft mesh and stops the sweep at 1640 kHz (below the MoM's floor at
draft quality, 1.65 MHz), so the circuit gives every point and the MoM makes only its two
2289-segment cross-check solves; the circuit's mesh is the same 457-segment mesh at any quality
(36 segments per turn), so the chart is that of the full spec.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

from simloop.impedance import run_sweep
from simloop.spec import load, loads
from simloop.tuning import RANGE_MARGIN, run_tune

SPEC = Path(__file__).resolve().parents[1] / "geometries" / "frame-loop.toml"


def _spans(r):
    """[(tap turns, first Hz, last Hz)] of the chart, in rising frequency."""
    taps = np.asarray(r.chart.channel_tap_index)
    f = np.asarray(r.frequencies_hz)
    out = []
    for j, t in enumerate(taps):
        if t < 0:
            continue
        if out and out[-1][0] == r.tap_turns[t] and taps[j - 1] == t:
            out[-1][2] = float(f[j])
        else:
            out.append([r.tap_turns[t], float(f[j]), float(f[j])])
    return [tuple(s) for s in out]


def _reach_at_c(r, tap_turns, c_f):
    """1/(2π√(L0 (C_s + C))) of a tap. [Hz]"""
    i = r.tap_turns.index(tap_turns)
    return 1 / (2 * np.pi * np.sqrt(r.inductance_h[i] * (r.self_capacitance_f[i] + c_f)))


def _check_switches(r):
    for s in r.chart.switches:
        # the old tap leaves where its setting nears the tuner's minimum within the stated margin
        c_edge = r.tuner.min_f * (1 + RANGE_MARGIN)
        edge = _reach_at_c(r, s.from_tap, c_edge)
        # uncertainty of the check: the model's capacitance error (≤ 1 %) moves f by ≤ 0.5 %,
        # and the channel raster is 9–10 kHz: within one channel step plus 1 %
        assert s.last_hz <= edge * 1.01 and s.first_hz >= edge * 0.99 - 10e3, (s, edge)
        # the printed reason names both taps and the stated criterion (the tuner's range margin)
        assert f"tap {s.from_tap} would need" in s.reason and f"tap {s.to_tap} tunes it" in s.reason
        assert f"within {RANGE_MARGIN:.0%}" in s.reason and "tuner's minimum" in s.reason


def _frame_text(stop="1640 kHz", tuner_min="15 pF", quality="draft"):
    text = SPEC.read_text()
    text = re.sub(r'stop = "[^"]*"', f'stop = "{stop}"', text)
    text = re.sub(r'min = "[^"]*"', f'min = "{tuner_min}"', text)
    return text.replace("[tuner]", f'[mesh]\nquality = "{quality}"\n\n[tuner]')


@pytest.fixture(scope="module")
def draft_frame():
    spec = loads(_frame_text())
    sweep = run_sweep(spec, cache=None, workers=1)
    assert np.all(sweep.source == "circuit")   # the MoM only cross-checks above its floor
    return spec, sweep


def test_frame_loop_chart_with_its_own_tuner_stays_on_tap_12(draft_frame):
    # 15–365 pF: tap 12 (L0 266 µH, C_s 19 pF) reaches 1/(2π√(266 µH · (19 + 15.75) pF)) ≈ 1.66
    # MHz inside the margin, above the itu-1 band's top channel (1602 kHz): one span, and the
    # chart says why taps 8 and 10 are not used.
    spec, sweep = draft_frame
    r = run_tune(spec, sweep, band="itu-1")
    assert _spans(r) == [(12, 531e3, 1602e3)]
    assert r.chart.reliable.all()
    assert _reach_at_c(r, 12, 15.75e-12) > 1602e3
    assert any("taps 8, 10 are not used" in n and "more turns tune every channel" in n for n in r.notes)


def test_frame_loop_chart_spans_12_10_8_with_a_larger_minimum(draft_frame):
    # 30 pF minimum (a 365 pF variable with its trimmer and the wiring's strays, common
    # practice): tap 12 stops near 1.39 MHz and tap 10 near 1.52 MHz [calc, formula above]; the
    # chart uses 12, 10, 8 from the bottom up, each once, every channel trusted.
    spec, sweep = draft_frame
    spec30 = loads(_frame_text(tuner_min="30 pF"))
    r = run_tune(spec30, sweep, band="itu-1")
    spans = _spans(r)
    assert [s[0] for s in spans] == [12, 10, 8]
    assert spans[0][1] == 531e3 and spans[-1][2] == 1602e3
    assert all(a[2] < b[1] for a, b in zip(spans[:-1], spans[1:]))
    assert r.chart.reliable.all()
    _check_switches(r)


@pytest.mark.slow
def test_frame_loop_spec_chart_full_mesh():
    # The spec as a user runs it (standard mesh, MoM cross-check above the floor): itu-1 on tap
    # 12 alone, and the itu-2 band (to 1700 kHz) switching once, 12 → 10, where tap 12 leaves
    # the tuner's margin.
    spec = load(SPEC)
    sweep = run_sweep(spec, workers=1)
    r1 = run_tune(spec, sweep, band="itu-1")
    assert _spans(r1) == [(12, 531e3, 1602e3)] and r1.chart.reliable.all()
    r2 = run_tune(spec, sweep, band="itu-2")
    spans = _spans(r2)
    assert [s[0] for s in spans] == [12, 10] and spans[-1][2] == 1700e3
    assert r2.chart.reliable.all()
    _check_switches(r2)


def test_frame_loop_tune_prints_inches(draft_frame, capsys):
    # The spec is written in inches ("26 1/2 in", "1/4 in"): the tap positions come back in feet
    # and inches. Winding to tap n of a stacked rectangular winding: n turns of the perimeter
    # 2 (32 + 26.5) in = 117 in [calc], the pitch advance adding (p/side)²/2 < 1e-4 of it.
    from simloop.report_tune import format_tune_summary

    spec, sweep = draft_frame
    assert spec.imperial
    r = run_tune(spec, sweep, band="itu-1")
    for n, wire in zip(r.tap_turns, r.tap_wire_m):
        assert wire == pytest.approx(n * 117 * 0.0254, rel=1e-4, abs=0)
    text = format_tune_summary(r)
    assert "78 ft (936 in, 23.77 m) of winding from the start" in text
    assert "117 ft (1404 in, 35.66 m)" in text
