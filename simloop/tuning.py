r"""Tuning a tapped loop: band coverage per tap, the channel chart, bandwidth and tuner voltage.

Everything here is evaluated on the lumped loop model fitted to exact circuit solves
(:meth:`simloop.impedance.SweepResult.model_z`, the matrix form of the 1/L_app fit, with the
proximity loss), never by re-solving per channel; how far that model is from exact circuit solves
at held-back frequencies across the band, and from direct MoM solves it was not fitted to, is
reported beside the results (:func:`held_back_error`).

The circuit
-----------
The tuning capacitor C_t sits across the start terminal and tap i (the other taps open). The loop
seen at that port is its open-circuit impedance Z_ii(f), which already contains the loop's own
self-capacitance and the leads. The parallel combination resonates where its susceptance vanishes:

.. math:: \mathrm{Im}\,\frac{1}{Z_{ii}} + \omega C_t = 0
          \quad\Rightarrow\quad C_t(f) = -\frac{\mathrm{Im}(1/Z_{ii})}{\omega}
          = \frac{X}{\omega |Z_{ii}|^2}

(:func:`tuning_capacitance`), which is 1/(ωX) to within 1/Q² (1e-5 here). Below the first
self-resonance C_t(f) falls monotonically (Foster's reactance theorem for the lossless part), so a
tuner range [C_min, C_max] covers exactly one interval f_low…f_high per tap, the resonances at
C_max and C_min (:func:`resonance_frequency`).

Q and bandwidth come from the admittance of the whole tuned circuit, not from the series X/R of
Z_ii (which understates Q near the self-resonance by the factor 1 − (f/f_srf)²):

.. math:: Q = \frac{\omega\, B'(\omega)}{2 G},\qquad
          B = \mathrm{Im}\frac{1}{Z_{ii}} + \omega C_t,\quad
          G = \mathrm{Re}\frac{1}{Z_{ii}} + \frac{\omega C_t}{Q_{cap}}

For R + jωL shunted by C_s this is exactly ωL/R (:func:`tuned_q`). The loop's part and the
capacitor's part are combined by :func:`simloop.reference.q_loaded`; the capacitor's loss counts
with the weight C_t/(C_t + C_s) because the self-capacitance stores energy without loss. No
receiver loading is included: a radio coupled to the loop lowers the Q further. The −3 dB
bandwidth is f/Q_L (:func:`simloop.reference.bandwidth_3db`); where it is narrower than the
channel's audio (±4.5 kHz on a 9 kHz raster, ±5 kHz on 10 kHz, common practice: half the channel
spacing) the loop cuts treble, by 10·log10(1 + (2 f_a / B)²) dB at the audio edge f_a.

The tuner voltage for an incident field E (optimum orientation: the wave arriving in the loop
plane) is V = Q_L h_e E with h_e = 2π Σ A_k / λ over the tap's active turns
(:func:`simloop.reference.effective_height_small_loop`), and the capacitor current I = V ω C_t.

Choosing the tap for a channel
------------------------------
A builder switches taps as rarely as possible and uses the most turns for the lowest frequencies,
working up (common practice). The chart therefore gives every tap one contiguous span of channels
(:func:`assign_taps`): starting at the bottom of the band on the tap with the most turns, it stays
on a tap while its setting lies inside the tuner's range by :data:`RANGE_MARGIN` (5 % of the
capacitance) plus the model's uncertainty of the setting (:func:`tuner_margins`), and moves to the
tap with the next fewer turns that tunes the channel inside that margin; it never goes back. More
turns also give the larger signal (h_e grows with the turns at a similar Q). Each switch point
says why it lies where it does (:class:`TapSwitch`).

Tap suggestions
---------------
When the taps leave gaps, :func:`suggest_taps` proposes a set of taps that covers the band with a
stated overlap margin, from an estimate of every possible tap (1…N turns): the quasi-static
inductance of the tap's wire path (:func:`simloop.reference.inductance_partial_sum`) scaled by the
MoM/quasi-static ratio of the existing taps, and a self-capacitance C_s = K/L0 with K = C_s·L0 of
the existing taps interpolated (the whole coil's self-resonance is seen at every tap, so C_s·L0 is
nearly the same for all taps). It is an estimate: confirm it with a sweep of the suggested taps.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.optimize import brentq

from simloop import reference
from simloop.constants import F_MAX_HZ, F_MIN_HZ  # the spec's limits [Hz], docs/references.md §13
from simloop.errors import SpecError
from simloop.geometry import WINDING, loop_from_spec
from simloop.impedance import RELIABLE_BELOW, SweepResult
from simloop.tuner import (
    PlateTuner,
    Tuner,
    air_layer_factor,
    fringing_excess_palmer1937,
    tuner_from_spec,
)
from simloop.units import format_length, format_quantity

__all__ = [
    "BAND_PLANS",
    "RANGE_MARGIN",
    "TAP_RULE",
    "BandPlan",
    "ChannelChart",
    "Coverage",
    "TapSwitch",
    "assign_taps",
    "tuner_margins",
    "HeldBackError",
    "TapSuggestion",
    "TuneResult",
    "band_plan",
    "coverage",
    "held_back_error",
    "resonance_frequency",
    "run_tune",
    "suggest_taps",
    "tuned_q",
    "tuning_capacitance",
]

#: Points of the log grid on which resonances are bracketed before root finding.
SCAN_POINTS = 3000
#: Overlap margin of suggested taps, as a fraction of frequency (at least; raised to the worst
#: inductance error of the sweep when that is larger).
OVERLAP_MARGIN = 0.03
#: Slide movement per channel below which a plate capacitor is hard to set by hand (our rule of
#: thumb, not a published figure). [m]
SLIDE_RESOLUTION_M = 0.5e-3
#: Transmit powers for the high-voltage caution. [W]
CAUTION_POWERS_W = (1.0, 10.0)


# --------------------------------------------------------------------------------------------
# Band plans
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class BandPlan:
    """Carrier frequencies of a broadcast band plan.

    Attributes
    ----------
    name : str
    frequencies_hz : ndarray, shape (m,)
        Channel carrier frequencies. [Hz]
    spacing_hz : float
        Channel spacing. [Hz]
    audio_hz : float
        Highest audio frequency a channel carries, taken as half the spacing (common practice). [Hz]
    description : str
        Where the raster comes from.
    """

    name: str
    frequencies_hz: np.ndarray
    spacing_hz: float
    audio_hz: float
    description: str


def _raster(start_hz: float, stop_hz: float, step_hz: float) -> np.ndarray:
    n = int(math.floor((stop_hz - start_hz) / step_hz + 1e-9)) + 1
    return start_hz + step_hz * np.arange(n)


_ITU_13 = ("ITU Radio Regulations art. 5, Regions 1 and 3: broadcasting 526.5–1606.5 kHz, carriers "
           "every 9 kHz from 531 to 1602 kHz")
_ITU_2 = ("ITU Radio Regulations art. 5, Region 2: broadcasting 525–1705 kHz, carriers every 10 kHz "
          "from 530 to 1700 kHz (the 1605–1705 kHz extension per the Rio de Janeiro agreement, 1988; "
          "approximate: the range is quoted from secondary sources)")

#: The named band plans (``itu-3`` is the same raster as ``itu-1``).
BAND_PLANS = {
    "itu-1": (531e3, 1602e3, 9e3, _ITU_13),
    "itu-2": (530e3, 1700e3, 10e3, _ITU_2),
    "itu-3": (531e3, 1602e3, 9e3, _ITU_13),
}


def band_plan(band) -> BandPlan:
    """The band plan named by ``band`` (``itu-1``, ``itu-2``, ``itu-3``) or a raster
    ``(start_hz, stop_hz, step_hz)`` (parse a ``START:STOP:STEP`` option with
    :func:`simloop.units.parse_band_raster`).

    Raises
    ------
    SpecError
        Key ``"--band"``, naming the value and the rule.
    """
    if isinstance(band, BandPlan):
        return band
    if isinstance(band, str):
        key = band.strip().lower()
        if key not in BAND_PLANS:
            raise SpecError("--band", f'"{band}" is not a named band plan; use itu-1, itu-2, itu-3 '
                                      "or a raster START:STOP:STEP such as 530k:1700k:10k")
        start, stop, step, desc = BAND_PLANS[key]
        return BandPlan(key, _raster(start, stop, step), step, step / 2, desc)
    start, stop, step = (float(v) for v in band)
    shown = f"{start:g}:{stop:g}:{step:g} Hz"
    if not (step > 0 and start > 0):
        raise SpecError("--band", f"{shown}: START and STEP must be > 0")
    if stop < start:
        raise SpecError("--band", f"{shown}: STOP must not be below START")
    if start < F_MIN_HZ or stop > F_MAX_HZ:
        hint = (" (bare numbers are Hz: did you mean kHz, e.g. 530k:1700k:10k?)"
                if max(start, stop) < F_MIN_HZ else "")
        raise SpecError("--band", f"{shown}: channels must lie within {F_MIN_HZ / 1e3:.0f} kHz–"
                                  f"{F_MAX_HZ / 1e6:.0f} MHz, the range the tool models{hint}")
    freqs = _raster(start, stop, step)
    if freqs.size > 2001:
        raise SpecError("--band", f"{shown} gives {freqs.size} channels; at most 2001 (raise STEP)")
    return BandPlan("custom", freqs, step, step / 2,
                    f"custom raster {start / 1e3:g}–{freqs[-1] / 1e3:g} kHz every {step / 1e3:g} kHz")


# --------------------------------------------------------------------------------------------
# The tuned circuit: pure functions of an impedance
# --------------------------------------------------------------------------------------------

def tuning_capacitance(z_ohm, frequency_hz):
    r"""Capacitance across a port of impedance Z that makes the combination resonate. [F]

    .. math:: C_t = -\mathrm{Im}(1/Z)/\omega

    Negative where the port is capacitive (above its self-resonance): no capacitor tunes it there.

    Parameters
    ----------
    z_ohm : array_like, complex
        Port impedance. [Ω]
    frequency_hz : array_like
        Frequency, broadcast against ``z_ohm``. [Hz]
    """
    w = 2 * np.pi * np.asarray(frequency_hz, dtype=float)
    return -(1.0 / np.asarray(z_ohm, dtype=complex)).imag / w


def tuned_q(z_of_f, frequency_hz, capacitance_f, capacitor_q=None, rel_step=1e-4):
    r"""Q of a port impedance tuned by a parallel capacitor, from the admittance slope.

    .. math:: Q = \frac{\omega B'}{2G},\quad B = \mathrm{Im}\,\frac{1}{Z} + \omega C_t,\quad
              G = \mathrm{Re}\,\frac{1}{Z} + \frac{\omega C_t}{Q_{cap}}

    Parameters
    ----------
    z_of_f : callable
        ``z_of_f(f)`` → Z at the frequencies ``f`` (1-D array in, same shape out). [Ω]
    frequency_hz : array_like, shape (m,)
        Resonant frequencies. [Hz]
    capacitance_f : array_like, shape (m,)
        Tuning capacitance at each. [F]
    capacitor_q : float, optional
        Capacitor Q; None for a lossless capacitor (then the result is the loop's own Q in the
        tuned circuit).
    rel_step : float
        Relative frequency step of the central difference. [-]

    Returns
    -------
    ndarray, shape (m,)
        Q. [-] (NaN where the slope or the conductance is not positive.)
    """
    f, c, slope, g_loop = _slope_and_conductance(z_of_f, frequency_hz, capacitance_f, rel_step)
    w = 2 * np.pi * f
    g = g_loop + (0.0 if capacitor_q is None else w * c / capacitor_q)
    with np.errstate(divide="ignore", invalid="ignore"):
        q = w * slope / (2 * g)
    return np.where((slope > 0) & (g > 0), q, np.nan)


def _slope_and_conductance(z_of_f, frequency_hz, capacitance_f, rel_step=1e-4):
    """dB/dω of the tuned circuit [F] and the port's conductance Re(1/Z) [S] (central difference)."""
    f = np.atleast_1d(np.asarray(frequency_hz, dtype=float))
    c = np.broadcast_to(np.asarray(capacitance_f, dtype=float), f.shape)
    w = 2 * np.pi * f
    y0 = 1.0 / np.asarray(z_of_f(f))
    yp = 1.0 / np.asarray(z_of_f(f * (1 + rel_step)))
    ym = 1.0 / np.asarray(z_of_f(f * (1 - rel_step)))
    slope = (yp.imag - ym.imag) / (2 * rel_step * w) + c
    return f, c, slope, y0.real


def _first_branch(c_req: np.ndarray) -> int:
    """Length of the leading part of a C_t(f) grid that is positive, finite and falling."""
    bad = ~np.isfinite(c_req) | (c_req <= 0)
    bad[1:] |= np.diff(c_req) >= 0
    idx = np.flatnonzero(bad)
    return int(idx[0]) if idx.size else c_req.size


def resonance_frequency(z_of_f, capacitance_f, f_lo_hz=F_MIN_HZ, f_hi_hz=F_MAX_HZ, points=SCAN_POINTS):
    """Frequency at which a port tuned by ``capacitance_f`` resonates, below its self-resonance.

    The required capacitance C_t(f) (:func:`tuning_capacitance`) is scanned on a log grid from
    ``f_lo_hz`` up to where it stops falling (the self-resonance), and the crossing with
    ``capacitance_f`` refined by Brent's method.

    Returns
    -------
    float
        Resonant frequency [Hz]; ``-inf`` if even ``f_lo_hz`` needs less capacitance (the
        resonance lies below the scan), ``+inf`` if the whole branch up to the
        self-resonance (or the top of the scan) needs more, NaN if the port is not inductive at
        ``f_lo_hz``.
    """
    grid = np.geomspace(f_lo_hz, f_hi_hz, points)
    c_req = tuning_capacitance(np.asarray(z_of_f(grid)), grid)
    n = _first_branch(c_req)
    if n == 0:
        return math.nan
    c = float(capacitance_f)
    if c_req[0] < c:
        return -math.inf
    if c_req[n - 1] > c:
        return math.inf
    i = int(np.flatnonzero(c_req[:n] <= c)[0])
    if i == 0:
        return float(grid[0])

    def g(f):
        return float(tuning_capacitance(np.asarray(z_of_f(np.array([f])))[0], f)) - c

    return float(brentq(g, grid[i - 1], grid[i], xtol=1e-9 * grid[i], rtol=1e-12))


def coverage(z_of_f, c_min_f, c_max_f, f_lo_hz=F_MIN_HZ, f_hi_hz=F_MAX_HZ):
    """Frequencies a tuner of range [c_min_f, c_max_f] tunes a port to: (f_low, f_high). [Hz]

    f_low is the resonance at ``c_max_f``, f_high the one at ``c_min_f``. A resonance below the
    scan comes back as ``f_lo_hz`` (coverage continues below), one above as ``f_hi_hz``; NaN if
    the port cannot be tuned at all in the scan (no inductive branch).
    """
    lo = resonance_frequency(z_of_f, c_max_f, f_lo_hz, f_hi_hz)
    hi = resonance_frequency(z_of_f, c_min_f, f_lo_hz, f_hi_hz)

    def clamp(v):
        if math.isnan(v):
            return math.nan
        return float(min(max(v, f_lo_hz), f_hi_hz))

    return clamp(lo), clamp(hi)


# --------------------------------------------------------------------------------------------
# Model error at held-back points: exact circuit solves and direct MoM solves
# --------------------------------------------------------------------------------------------

#: The lumped model is compared with exact circuit solves at the geometric midpoints of this many
#: log-spaced intervals over the band and at its two ends (any that is a fit frequency left out).
HELD_BACK_POINTS = 7


@dataclass(frozen=True)
class HeldBackError:
    """The lumped model tune uses against exact solves it was not fitted to.

    Two comparisons: with exact circuit solves at held-back frequencies across the band (the
    model with its proximity loss, as tune uses it, against the circuit with the same loss), and
    with the sweep's direct MoM points that were not fitted (the model without the proximity
    correction, since NEC has none).

    Attributes
    ----------
    frequencies_hz : ndarray, shape (p,)
        Held-back MoM points used (direct MoM, trusted, not among the fit frequencies). [Hz]
    relative_error : ndarray, shape (p, k)
        |Z_ii,model − Z_ii,MoM| / |Z_ii,MoM| (model without the proximity correction). [-]
    max_relative_error : ndarray, shape (k,)
        Largest of those per tap (NaN without points). [-]
    mom_error_estimate : ndarray, shape (p, k)
        The sweep's own error estimate of those MoM points (large near the self-resonance, where
        the comparison then says little). [-]
    excluded_hz : ndarray
        Held-back MoM points left out because they lie below the mesh's trusted floor (solved
        with ``--direct`` in the low-frequency breakdown: the MoM itself is wrong there). [Hz]
    inside_fit_span : bool
        True when every MoM point used lies between the lowest and highest fit frequency.
    relative_to_fit : str
        Where the MoM points lie against the fit window: "inside", "above", "below" or "mixed"
        ("none" without points).
    circuit_hz : ndarray, shape (c,)
        Held-back frequencies of the exact circuit solves (none without a circuit). [Hz]
    circuit_relative_error : ndarray, shape (c, k)
        |Z_ii,model − Z_ii,circuit| / |Z_ii,circuit|, both with the proximity loss. [-]
    circuit_resistance_error : ndarray, shape (c, k)
        |R_ii,model − R_ii,circuit| / R_ii,circuit: what the loaded Q rests on. [-]
    circuit_relative_to_fit : str
        Where the circuit points lie against the fit window (as ``relative_to_fit``).
    """

    frequencies_hz: np.ndarray
    relative_error: np.ndarray
    max_relative_error: np.ndarray
    mom_error_estimate: np.ndarray
    excluded_hz: np.ndarray
    inside_fit_span: bool
    relative_to_fit: str = "none"
    circuit_hz: np.ndarray = field(default_factory=lambda: np.zeros(0))
    circuit_relative_error: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    circuit_resistance_error: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    circuit_relative_to_fit: str = "none"

    @property
    def circuit_max_relative_error(self) -> np.ndarray:
        """Largest |Z| error against the circuit per tap, (k,) (NaN without points). [-]"""
        e = self.circuit_relative_error
        return e.max(axis=0) if e.size else np.full(e.shape[1], np.nan)

    @property
    def circuit_max_resistance_error(self) -> np.ndarray:
        """Largest resistance error against the circuit per tap, (k,). [-]"""
        e = self.circuit_resistance_error
        return e.max(axis=0) if e.size else np.full(e.shape[1], np.nan)


def _where(fh: np.ndarray, fit: np.ndarray) -> str:
    if fh.size == 0:
        return "none"
    below = fh < fit.min() * (1 - 1e-9)
    above = fh > fit.max() * (1 + 1e-9)
    if not np.any(below | above):
        return "inside"
    return "above" if np.all(above) else "below" if np.all(below) else "mixed"


def _fit_hz(sweep: SweepResult) -> np.ndarray:
    model = sweep.model_proximity if getattr(sweep, "model_proximity", None) is not None else sweep.model
    return np.asarray(model.fit_hz, dtype=float)


def _circuit_check(sweep: SweepResult, band_hz) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Held-back frequencies (c,), |Z| errors (c, k) and R errors (c, k) against exact circuit
    solves over ``band_hz`` (:data:`HELD_BACK_POINTS`; fit frequencies left out)."""
    k = len(sweep.tap_turns)
    if getattr(sweep, "circuit", None) is None:
        return np.zeros(0), np.zeros((0, k)), np.zeros((0, k))
    lo, hi = (float(band_hz[0]), float(band_hz[1])) if band_hz is not None else (
        float(np.min(sweep.frequencies_hz)), float(np.max(sweep.frequencies_hz)))
    fit = _fit_hz(sweep)
    grid = np.geomspace(lo, hi, HELD_BACK_POINTS + 1)
    fh = np.concatenate([[lo], np.sqrt(grid[:-1] * grid[1:]), [hi]])   # midpoints and the ends
    fh = fh[[not np.any(np.abs(fit - x) <= 1e-6 * x) for x in fh]]
    idx = np.arange(k)
    z_ex = np.array([sweep.circuit.solve(f).z_ohm[idx, idx] for f in fh]).reshape(-1, k)
    z_mod = sweep.model_z(fh, proximity=True)[:, idx, idx]
    rel = np.abs(z_mod - z_ex) / np.abs(z_ex)
    r_rel = np.abs(z_mod.real - z_ex.real) / np.abs(z_ex.real)
    return fh, rel, r_rel


def held_back_error(sweep: SweepResult, band_hz=None) -> HeldBackError | None:
    """Compare tune's lumped model with exact circuit solves and direct MoM points it was not
    fitted to.

    Parameters
    ----------
    sweep : SweepResult
    band_hz : (float, float), optional
        Span of the circuit comparison (default: the sweep's range). [Hz]

    Returns None only when the sweep has neither a circuit nor an unfitted MoM point (the model
    then rests on its fit alone; never invent one). MoM points below the mesh's trusted floor
    (the breakdown region, solved only with ``--direct``) are excluded and listed in
    ``excluded_hz``.
    """
    f = np.asarray(sweep.frequencies_hz, dtype=float)
    k = len(sweep.tap_turns)
    fit = np.asarray(sweep.model.fit_hz, dtype=float)
    mom = np.asarray(sweep.source) == "mom"
    fitted = np.array([np.any(np.abs(fit - x) <= 1e-9 * x) for x in f], dtype=bool)
    held = mom & ~fitted
    ch, c_rel, c_r = _circuit_check(sweep, band_hz)
    if not np.any(held) and ch.size == 0:
        return None
    circuit = dict(circuit_hz=ch, circuit_relative_error=c_rel, circuit_resistance_error=c_r,
                   circuit_relative_to_fit=_where(ch, _fit_hz(sweep)))
    trusted = held & (f >= sweep.mesh.floor_frequency_hz() * (1 - 1e-9))
    excluded = f[held & ~trusted]
    if not np.any(trusted):
        return HeldBackError(np.array([]), np.zeros((0, k)), np.full(k, np.nan), np.zeros((0, k)),
                             excluded, False, **circuit)
    fh = f[trusted]
    idx = np.arange(k)
    z_mom = sweep.z_ohm[trusted][:, idx, idx]
    z_mod = sweep.model_z(fh, proximity=False)[:, idx, idx]
    rel = np.abs(z_mod - z_mom) / np.abs(z_mom)
    where = _where(fh, fit)
    return HeldBackError(fh, rel, rel.max(axis=0), sweep.error_estimate[trusted], excluded,
                         where == "inside", where, **circuit)


# --------------------------------------------------------------------------------------------
# Tap suggestions
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class TapSuggestion:
    """Proposed taps and what they would cover (an estimate, see the module notes).

    Attributes
    ----------
    taps : tuple of int
        Suggested tap positions in turns (empty if not even one tap reaches the band).
    f_low_hz, f_high_hz : ndarray, shape (len(taps),)
        Estimated coverage of each suggested tap. [Hz]
    margin : float
        Overlap margin aimed at, as a fraction of frequency. [-]
    covers_band : bool
        True when the suggestion covers the whole band with the margin.
    problems : tuple of str
        What taps alone cannot fix (e.g. the capacitance the bottom of the band needs).
    capacitance_needed_f : tuple of (float, float)
        Necessary conditions on a tuner for this winding to cover the band with the margin: its
        minimum at most [0] (what one turn needs at the top) and its maximum at least [1] (what
        all turns need at the bottom). [F]
    estimated_inductance_h : ndarray, shape (N,)
        The estimate L0(n) for n = 1 … N turns. [H]
    estimated_self_capacitance_f : ndarray, shape (N,)
        The estimate C_s(n). [F]
    method : str
    """

    taps: tuple[int, ...]
    f_low_hz: np.ndarray
    f_high_hz: np.ndarray
    margin: float
    covers_band: bool
    problems: tuple[str, ...]
    capacitance_needed_f: tuple[float, float]
    estimated_inductance_h: np.ndarray
    estimated_self_capacitance_f: np.ndarray
    method: str


def _pf(value_f: float) -> str:
    """A capacitance for messages, 3 significant figures in pF, nF or µF."""
    return format_quantity(float(value_f), "capacitance", 3)


def _single_tap_inductance(spec, n: int) -> float:
    """Quasi-static inductance of the path through a tap at n turns (same frame, winding, leads)."""
    g = loop_from_spec(spec, tap_turns=(n,))
    return float(reference.inductance_partial_sum(*g.current_path(0), g.wire_radius_m))


def _estimate_taps(spec, sweep: SweepResult, f_ref_hz: float):
    """L0(n) and C_s(n) for n = 1..N from the quasi-static path scaled to the MoM taps."""
    n_all = np.arange(1, spec.winding.turns + 1)
    taps = np.array(sweep.tap_turns)
    l_qs = np.array([_single_tap_inductance(spec, int(n)) for n in n_all])
    l0 = sweep.inductance_h
    ratio = l0 / l_qs[taps - 1]
    l_est = l_qs * np.interp(n_all, taps, ratio)
    z = sweep.model_z(np.array([f_ref_hz]), proximity=True)[0]
    w = 2 * np.pi * f_ref_hz
    # self-capacitance seen at each tap; a small negative value is fit noise on a loop whose
    # self-resonance lies far above the band, physically it is ≥ 0
    cs = np.maximum(1.0 / (w**2 * l0) - tuning_capacitance(np.diag(z), f_ref_hz), 0.0)
    k_prod = np.interp(n_all, taps, cs * l0)
    return n_all, l_est, k_prod / l_est


def suggest_taps(spec, sweep: SweepResult, tuner: Tuner, f_bottom_hz: float, f_top_hz: float,
                 margin: float = OVERLAP_MARGIN) -> TapSuggestion:
    """Propose taps that cover f_bottom…f_top with an overlap margin (fewest taps, greedy).

    Starting at the top of the band, each step takes the tap with the most turns that still
    reaches the lower edge of the previous tap's coverage raised by the margin; this is the
    fewest taps that can cover the band (the interval-covering greedy rule).
    """
    f_ref = math.sqrt(f_bottom_hz * f_top_hz)
    n_all, l_est, cs_est = _estimate_taps(spec, sweep, f_ref)
    two_pi = 2 * np.pi
    f_low = 1.0 / (two_pi * np.sqrt(l_est * (tuner.max_f + cs_est)))
    f_high = 1.0 / (two_pi * np.sqrt(l_est * (tuner.min_f + cs_est)))
    top, bottom = f_top_hz * (1 + margin), f_bottom_hz / (1 + margin)
    problems: list[str] = []
    chosen: list[int] = []
    reach_top = np.flatnonzero(f_high >= top)
    # Capacitance a tuner would need (with the margin): most on all turns at the bottom, least on
    # the fewest turns at the top.
    c_max_needed = float(1.0 / ((two_pi * bottom) ** 2 * l_est[-1]) - cs_est[-1])
    c_min_needed = float(1.0 / ((two_pi * top) ** 2 * l_est[0]) - cs_est[0])
    if reach_top.size == 0:
        problems.append(
            f"no tap reaches {f_top_hz / 1e3:.0f} kHz + {margin:.0%}: even one turn needs "
            f"{_pf(c_min_needed)} there (its self-capacitance is about "
            f"{_pf(cs_est[0])}) against the tuner's minimum {_pf(tuner.min_f)}")
        start = int(np.argmax(f_high))
    else:
        start = int(reach_top[-1])
    cur = start
    chosen.append(int(n_all[cur]))
    while f_low[cur] > bottom:
        nxt = np.flatnonzero((np.arange(n_all.size) > cur) & (f_high >= f_low[cur] * (1 + margin)))
        if nxt.size:
            cur = int(nxt[-1])
        elif cur + 1 < n_all.size:
            problems.append(f"taps {n_all[cur]} and {n_all[cur + 1]} overlap by less than {margin:.0%}")
            cur += 1
        else:
            break
        chosen.append(int(n_all[cur]))
    if f_low[cur] > bottom:
        problems.append(
            f"no tap reaches {f_bottom_hz / 1e3:.0f} kHz − {margin:.0%}: all {n_all[-1]} turns need "
            f"about {_pf(c_max_needed)} there, the tuner gives {_pf(tuner.max_f)}; "
            f"use a larger capacitor (or a fixed capacitor switched in parallel) or more turns")
    idx = np.array(chosen) - 1
    covers = not problems
    return TapSuggestion(
        taps=tuple(sorted(chosen)),
        f_low_hz=f_low[np.sort(idx)],
        f_high_hz=f_high[np.sort(idx)],
        margin=margin,
        covers_band=covers,
        problems=tuple(problems),
        capacitance_needed_f=(c_min_needed, c_max_needed),
        estimated_inductance_h=l_est,
        estimated_self_capacitance_f=cs_est,
        method=("estimate: quasi-static inductance of each tap's path scaled by the MoM/quasi-static "
                "ratio of the existing taps, self-capacitance C_s = K/L0 with K = C_s·L0 of the "
                f"existing taps at {f_ref / 1e3:.0f} kHz interpolated; confirm with a sweep of the "
                "suggested taps"),
    )


# --------------------------------------------------------------------------------------------
# The result
# --------------------------------------------------------------------------------------------

#: Margin a setting keeps from the tuner's range ends before the chart moves to the next tap, as a
#: fraction of the capacitance, on top of the model's uncertainty of the setting (our choice, not
#: a published figure: room for the real loop and capacitor to differ from the model by a few per
#: cent; 5 % of the capacitance is about 2.5 % of frequency).
RANGE_MARGIN = 0.05

#: How the chart assigns taps (said in every result).
TAP_RULE = (
    "each tap is used over one span of channels: from the bottom of the band the chart uses the "
    "most turns (common practice: the most turns for the lowest frequencies, working up) and stays "
    f"on a tap while its setting lies inside the tuner's range by at least {RANGE_MARGIN:.0%} of the "
    "capacitance plus the model's uncertainty of it; there it moves to the tap with the next fewer "
    "turns that tunes the channel inside that margin. A tap is kept into its margin only where no tap "
    "with fewer turns tunes the channel inside it")


@dataclass(frozen=True)
class Coverage:
    """What each tap reaches with the tuner's range, and what no tap reaches.

    Attributes
    ----------
    f_low_hz, f_high_hz : ndarray, (k,)
        Coverage of each tap (resonance at C_max and at C_min). [Hz]
    coverage_error : ndarray, (k, 2)
        Relative frequency uncertainty of f_low and f_high. [-]
    gaps_hz : ndarray, (g, 2)
        Spans of the band no tap covers. [Hz]
    overlaps : tuple of dict
        Adjacent taps' common coverage: ``taps``, ``span_hz`` (or None) and ``margin``.
    suggestion : TapSuggestion or None
        Taps that would close the gaps (only when there are gaps).
    """

    f_low_hz: np.ndarray
    f_high_hz: np.ndarray
    coverage_error: np.ndarray
    gaps_hz: np.ndarray
    overlaps: tuple[dict, ...]
    suggestion: TapSuggestion | None


@dataclass(frozen=True)
class TapSwitch:
    """A switch point of the chart: ``from_tap`` is used up to ``last_hz``, ``to_tap`` from
    ``first_hz`` on (taps in turns, frequencies in Hz), and why the switch lies there."""

    from_tap: int
    to_tap: int
    last_hz: float
    first_hz: float
    reason: str


@dataclass(frozen=True)
class ChannelChart:
    """The channel chart: per-channel arrays (m,), per-channel-and-tap arrays (m, k).

    A channel no tap reaches has ``channel_tap_index`` −1 and NaN in its numbers.

    Attributes
    ----------
    frequencies_hz : ndarray, (m,)
        Channel carriers. [Hz]
    capacitance_all_f : ndarray, (m, k)
        Tuning capacitance of every tap at every channel (negative above self-resonance). [F]
    reachable, comfortable : ndarray of bool, (m, k)
        The tuner's range contains that capacitance; it does so with :data:`RANGE_MARGIN` plus
        the model's uncertainty to spare.
    q_loaded_all : ndarray, (m, k)
        Loaded Q of every tap where it is reachable. [-]
    channel_tap_index : ndarray of int, (m,)
    channel_reason : tuple of str, (m,)
        Why no tap is used for the channel ("" where one is).
    capacitance_f, capacitance_error_f, position_m : ndarray, (m,)
        Setting of the chosen tap [F], its uncertainty from the model's error [F], and the slide
        position (plate tuner; NaN otherwise) [m].
    capacitance_step_f, position_step_m : ndarray, (m,)
        Change of the setting from one channel to the next. [F], [m]
    q_loop, q_loaded, q_loaded_no_proximity : ndarray, (m,)
        Loop Q in the tuned circuit, loaded Q with the capacitor's loss, and the loaded Q without
        the proximity-effect correction. [-]
    bandwidth_hz, bandwidth_no_proximity_hz : ndarray, (m,)
        −3 dB bandwidth f/Q_L. [Hz]
    audio_cut : ndarray of bool, (m,)
        Bandwidth narrower than twice the channel's audio.
    audio_loss_db : ndarray, (m,)
        Loss of the top audio frequency by the loop's selectivity. [dB]
    error_estimate : ndarray, (m,)
        Relative error of the chosen tap's model at the channel. [-]
    reliable, edge, outside_sweep : ndarray of bool, (m,)
        Model trusted at the channel; setting within its uncertainty of a range end; channel
        beyond the sweep's frequencies.
    effective_height_m, voltage_v, current_a : ndarray, (m,)
        h_e of the chosen tap [m], tuner voltage and capacitor current at the field [V], [A].
    switches : tuple of TapSwitch
        The switch points, from the bottom of the band up.
    rule : str
        How taps were assigned (:data:`TAP_RULE`).
    """

    frequencies_hz: np.ndarray
    capacitance_all_f: np.ndarray
    reachable: np.ndarray
    comfortable: np.ndarray
    q_loaded_all: np.ndarray
    channel_tap_index: np.ndarray
    channel_reason: tuple[str, ...]
    capacitance_f: np.ndarray
    capacitance_error_f: np.ndarray
    position_m: np.ndarray
    capacitance_step_f: np.ndarray
    position_step_m: np.ndarray
    q_loop: np.ndarray
    q_loaded: np.ndarray
    q_loaded_no_proximity: np.ndarray
    bandwidth_hz: np.ndarray
    bandwidth_no_proximity_hz: np.ndarray
    audio_cut: np.ndarray
    audio_loss_db: np.ndarray
    error_estimate: np.ndarray
    reliable: np.ndarray
    edge: np.ndarray
    outside_sweep: np.ndarray
    effective_height_m: np.ndarray
    voltage_v: np.ndarray
    current_a: np.ndarray
    switches: tuple[TapSwitch, ...]
    rule: str = TAP_RULE


@dataclass(frozen=True)
class TuneResult:
    """Coverage, channel chart, bandwidth and tuner voltage of a tapped loop and its tuner.

    Grouped as ``coverage`` (:class:`Coverage`), ``chart`` (:class:`ChannelChart`) and ``notes``;
    the fields of ``coverage`` and ``chart`` are also readable directly on the result
    (``result.gaps_hz`` is ``result.coverage.gaps_hz``).

    Attributes
    ----------
    tap_turns : tuple of int
    self_resonance_hz, self_capacitance_f, inductance_h, inductance_error : ndarray, (k,)
        From the sweep's model. [Hz], [F], [H], [-]
    curve_frequencies_hz : ndarray, (p,), curve_capacitance_f : ndarray, (p, k)
        Dense C_t(f) per tap for plots (NaN above each tap's self-resonance). [Hz], [F]
    model_error : HeldBackError or None
    fit_hz : ndarray
        The model's fit frequencies. [Hz]
    sweep_range_hz : (float, float)
    imperial : bool
        The spec was written in inches: lengths are shown in inches and feet too.
    tap_wire_m : ndarray, (k,), optional
        Winding wire from the start terminal to each tap (where a builder solders it). [m]
    """

    name: str
    band: BandPlan
    tuner: Tuner
    field_v_per_m: float
    tap_turns: tuple[int, ...]
    self_resonance_hz: np.ndarray
    self_capacitance_f: np.ndarray
    inductance_h: np.ndarray
    inductance_error: np.ndarray
    coverage: Coverage
    chart: ChannelChart
    curve_frequencies_hz: np.ndarray
    curve_capacitance_f: np.ndarray
    model_error: HeldBackError | None
    fit_hz: np.ndarray
    sweep_range_hz: tuple[float, float]
    cautions: tuple[str, ...]
    notes: tuple[str, ...] = field(default=())
    imperial: bool = False
    tap_wire_m: np.ndarray | None = None

    def __getattr__(self, name: str):
        if name.startswith("__") or name in ("coverage", "chart"):
            raise AttributeError(name)
        for group in (object.__getattribute__(self, "chart"), object.__getattribute__(self, "coverage")):
            if hasattr(group, name):
                return getattr(group, name)
        raise AttributeError(f"{type(self).__name__!r} has no attribute {name!r}")

    @property
    def channel_tap(self) -> np.ndarray:
        """Tap (in turns) chosen for each channel, 0 where none reaches it. (m,)"""
        turns = np.array(self.tap_turns)
        idx = self.chart.channel_tap_index
        return np.where(idx >= 0, turns[np.maximum(idx, 0)], 0)

    @property
    def covered(self) -> np.ndarray:
        """Channels the chart tunes. (m,) bool"""
        return self.chart.channel_tap_index >= 0


# --------------------------------------------------------------------------------------------
# Assigning taps to channels (pure: arrays in, arrays out)
# --------------------------------------------------------------------------------------------

def tuner_margins(capacitance_f, capacitance_error_f, tuner: Tuner, margin: float = RANGE_MARGIN):
    """Which settings the tuner reaches, within its uncertainty, and with the margin to spare.

    Parameters
    ----------
    capacitance_f, capacitance_error_f : array_like
        Setting and its uncertainty. [F]
    tuner : Tuner
    margin : float
        Relative capacitance margin from the range ends. [-]

    Returns
    -------
    (reachable, inside_uncertainty, comfortable) : ndarrays of bool
        C_min ≤ C ≤ C_max; the same by the uncertainty δC; and
        C_min·(1 + margin) ≤ C − δC, C + δC ≤ C_max/(1 + margin).
    """
    c = np.asarray(capacitance_f, dtype=float)
    dc = np.abs(np.asarray(capacitance_error_f, dtype=float))
    with np.errstate(invalid="ignore"):
        reach = (c > 0) & (c >= tuner.min_f) & (c <= tuner.max_f)
        inside = reach & (c - dc >= tuner.min_f) & (c + dc <= tuner.max_f)
        comfy = reach & (c - dc >= tuner.min_f * (1 + margin)) & (c + dc <= tuner.max_f / (1 + margin))
    return reach, inside, comfy


def assign_taps(tap_turns, reachable, comfortable):
    """Assign each channel (rows, rising frequency) a tap: one contiguous span per tap.

    The rule is :data:`TAP_RULE`: taps are taken in order of falling turns, never back; the
    chart stays on a tap while it is ``comfortable``, moves to the tap with the most turns among
    those left that is, and keeps a merely ``reachable`` tap only where no tap left is
    comfortable.

    Parameters
    ----------
    tap_turns : sequence of int, (k,)
    reachable, comfortable : ndarray of bool, (m, k)

    Returns
    -------
    choice : ndarray of int, (m,)
        Tap index per channel, −1 where no tap left in the order reaches it.
    switches : list of (int, int, int)
        (channel index of the first channel on the new tap, old tap index, new tap index).
    """
    reachable = np.asarray(reachable, dtype=bool)
    comfortable = np.asarray(comfortable, dtype=bool) & reachable
    order = sorted(range(len(tap_turns)), key=lambda i: -tap_turns[i])
    m = reachable.shape[0]
    choice = np.full(m, -1, dtype=int)
    switches: list[tuple[int, int, int]] = []
    at = None  # position in `order` of the tap in use
    for j in range(m):
        left = order if at is None else order[at:]
        if at is not None and comfortable[j, order[at]]:
            pick = order[at]
        else:
            pick = next((i for i in left if comfortable[j, i]), None)
            if pick is None and at is not None and reachable[j, order[at]]:
                pick = order[at]
            if pick is None:
                pick = next((i for i in left if reachable[j, i]), None)
        if pick is None:
            continue
        pos = order.index(pick)
        if at is not None and pos != at:
            switches.append((j, order[at], pick))
        at = pos
        choice[j] = pick
    return choice, switches


def _switch_reason(j: int, a: int, b: int, f, turns, c_all, reach, skipped, tuner: Tuner,
                   f_high_a: float) -> str:
    """Why the chart moves from tap index a to b at channel j (say it in the builder's terms)."""
    fa = f"{f[j] / 1e3:.0f} kHz"
    if reach[j, a]:
        end = "minimum" if c_all[j, a] < np.sqrt(tuner.min_f * tuner.max_f) else "maximum"
        lim = tuner.min_f if end == "minimum" else tuner.max_f
        why = (f"at {fa} tap {turns[a]} would need {_pf(c_all[j, a])}, within {RANGE_MARGIN:.0%} "
               f"(plus the model's uncertainty) of the tuner's {end} {_pf(lim)}")
    elif c_all[j, a] > 0:
        side = "below the tuner's minimum" if c_all[j, a] < tuner.min_f else "above the tuner's maximum"
        why = f"at {fa} tap {turns[a]} would need {_pf(c_all[j, a])}, {side}"
    else:
        why = f"at {fa} tap {turns[a]} is above its self-resonance"
    if np.isfinite(f_high_a):
        why += f" (tap {turns[a]} reaches up to {f_high_a / 1e3:.0f} kHz at the tuner's minimum)"
    why += f"; tap {turns[b]} tunes it with {_pf(c_all[j, b])}"
    if skipped:
        why += (f" (tap{'s' if len(skipped) > 1 else ''} {', '.join(str(turns[s]) for s in skipped)} "
                "skipped: not inside the margin there)")
    return why


# --------------------------------------------------------------------------------------------
# run_tune and its stages
# --------------------------------------------------------------------------------------------

def _tap_z(sweep: SweepResult, i: int, proximity: bool = True):
    return lambda f: sweep.model_z(np.atleast_1d(f), proximity=proximity)[:, i, i]


def _interp_error(sweep: SweepResult, f: np.ndarray) -> np.ndarray:
    order = np.argsort(sweep.frequencies_hz)
    fs = sweep.frequencies_hz[order]
    return np.column_stack([np.interp(f, fs, sweep.error_estimate[order, i])
                            for i in range(len(sweep.tap_turns))])


def _gaps(band_lo: float, band_hi: float, lows: np.ndarray, highs: np.ndarray) -> list[list[float]]:
    spans = sorted((lo, hi) for lo, hi in zip(lows, highs) if np.isfinite(lo) and np.isfinite(hi) and hi > lo)
    gaps, cursor = [], band_lo
    for lo, hi in spans:
        if lo > cursor and cursor < band_hi:
            gaps.append([float(cursor), float(min(lo, band_hi))])
        cursor = max(cursor, hi)
    if cursor < band_hi:
        gaps.append([float(cursor), float(band_hi)])
    return gaps


def _overlaps(turns, lows, highs) -> list[dict]:
    """Common coverage of taps adjacent in turns: span [Hz] and margin (hi/lo − 1, negative for
    a gap between them)."""
    out = []
    for a in range(len(turns) - 1):
        b = a + 1
        lo, hi = max(lows[a], lows[b]), min(highs[a], highs[b])
        ratio = hi / lo if np.isfinite(lo) and np.isfinite(hi) and lo > 0 else math.nan
        out.append({"taps": (int(turns[a]), int(turns[b])),
                    "span_hz": (float(lo), float(hi)) if hi > lo else None,
                    "margin": None if math.isnan(ratio) else float(ratio - 1)})
    return out


def _reason(c_row: np.ndarray, below: np.ndarray, tuner: Tuner, turns) -> str:
    """Why no tap reaches a channel, with the capacitance the nearest tap would need."""
    usable = below & (c_row > 0)
    if np.any(usable) and np.all(c_row[usable] > tuner.max_f):
        i = int(np.argmin(np.where(usable, c_row, np.inf)))
        return (f"needs {_pf(c_row[i])} on tap {turns[i]}, above the tuner's maximum "
                f"{_pf(tuner.max_f)}")
    if not np.any(usable) or np.all(c_row[usable] < tuner.min_f):
        if np.any(usable):
            i = int(np.argmax(np.where(usable, c_row, -np.inf)))
            return (f"needs {_pf(c_row[i])} on tap {turns[i]}, below the tuner's minimum "
                    f"{_pf(tuner.min_f)}")
        return "above every tap's self-resonance: no capacitor tunes it"
    reach = usable & (c_row >= tuner.min_f) & (c_row <= tuner.max_f)
    if np.any(reach):
        names = ", ".join(str(turns[i]) for i in np.flatnonzero(reach))
        return (f"only tap {names} reaches it, which the chart has already left for fewer turns "
                "(each tap keeps one span)")
    return "between the taps' ranges: one needs more than the tuner's maximum, another less than its minimum"


@dataclass(frozen=True)
class _TapGrid:
    """Every tap at every channel (internal stage result, shapes (m, k))."""

    c_all: np.ndarray
    c_err: np.ndarray
    err: np.ndarray
    below_srf: np.ndarray
    reachable: np.ndarray
    inside: np.ndarray
    comfortable: np.ndarray
    trusted: np.ndarray
    outside: np.ndarray
    q_loop: np.ndarray
    q_l: np.ndarray
    q_l_np: np.ndarray
    h_e: np.ndarray
    volts: np.ndarray


def _loaded_q(sweep: SweepResult, tuner: Tuner, f, c_all, reachable):
    """Loop Q, loaded Q and loaded Q without proximity effect of every reachable tap setting."""
    m, k = c_all.shape
    q_loop, q_cap, q_loop_np = (np.full((m, k), np.nan) for _ in range(3))
    for i in range(k):
        sel = reachable[:, i]
        if not np.any(sel):
            continue
        fs, cs = f[sel], c_all[sel, i]
        q_loop[sel, i] = tuned_q(_tap_z(sweep, i), fs, cs)
        q_loop_np[sel, i] = tuned_q(_tap_z(sweep, i, proximity=False), fs, cs)
        # The capacitor's loss as a Q of the tuned circuit: its conductance ωC_t/Q_cap against
        # the same stored energy, ωB'/(2ωC_t/Q_cap) (so the lossless self-capacitance dilutes it).
        _, _, slope, _ = _slope_and_conductance(_tap_z(sweep, i), fs, cs)
        q_cap[sel, i] = slope * tuner.q / (2 * cs)
    with np.errstate(invalid="ignore"):
        q_l = np.where(reachable, reference.q_loaded(np.where(reachable, q_loop, 1.0),
                                                     np.where(reachable, q_cap, 1.0)), np.nan)
        q_l_np = np.where(reachable, reference.q_loaded(np.where(reachable, q_loop_np, 1.0),
                                                        np.where(reachable, q_cap, 1.0)), np.nan)
    return q_loop, q_l, q_l_np


def _evaluate_taps(sweep: SweepResult, tuner: Tuner, f: np.ndarray, turns, field_v_per_m: float) -> _TapGrid:
    """Stage 1: the setting, its margins, Q and tuner voltage of every tap at every channel."""
    k = len(turns)
    idx = np.arange(k)
    z = sweep.model_z(f, proximity=True)[:, idx, idx]
    c_all = tuning_capacitance(z, f[:, None])
    srf = np.asarray(sweep.self_resonance_hz, dtype=float)
    below_srf = np.where(np.isfinite(srf), f[:, None] < srf[None, :], True)
    err = _interp_error(sweep, f)
    c_err = np.abs(c_all) * err
    reach, inside, comfy = tuner_margins(c_all, c_err, tuner)
    reach &= below_srf
    inside &= below_srf
    comfy &= below_srf
    outside = f > float(np.max(sweep.frequencies_hz)) * (1 + 1e-9)
    trusted = (err < RELIABLE_BELOW) & ~outside[:, None]
    q_loop, q_l, q_l_np = _loaded_q(sweep, tuner, f, c_all, reach)
    areas = sweep.geometry.turn_area_m2()
    perimeter = float(sweep.geometry.lengths_m[(np.array(sweep.geometry.kinds) == WINDING)
                                               & (sweep.geometry.turn == 0)].sum())
    h_e = np.column_stack([
        reference.effective_height_small_loop(areas[:n].mean(), f, turns=n, perimeter_m=perimeter)
        for n in turns])
    return _TapGrid(c_all, c_err, err, below_srf, reach, inside, comfy, trusted, outside,
                    q_loop, q_l, q_l_np, h_e, q_l * h_e * field_v_per_m)


def _chart(g: _TapGrid, choice, raw_switches, f, turns, tuner: Tuner, plan: BandPlan,
           f_high: np.ndarray) -> ChannelChart:
    """Stage 3: the chosen tap's numbers per channel."""
    m = f.size
    ok = choice >= 0
    pick = np.maximum(choice, 0)
    rows = np.arange(m)

    def chosen(a):
        return np.where(ok, a[rows, pick], np.nan)

    cap = chosen(g.c_all)
    pos = tuner.position_m(cap) if tuner.has_position else np.full(m, np.nan)
    dcdf = np.gradient(g.c_all, f, axis=0) if m > 1 else np.zeros_like(g.c_all)
    c_step = np.abs(chosen(dcdf)) * plan.spacing_hz
    pos_step = c_step / tuner.capacitance_per_m if isinstance(tuner, PlateTuner) else np.full(m, np.nan)
    ql, qlnp = chosen(g.q_l), chosen(g.q_l_np)
    bw, bw_np = np.full(m, np.nan), np.full(m, np.nan)
    if np.any(ok):
        bw[ok] = reference.bandwidth_3db(f[ok], ql[ok])
        bw_np[ok] = reference.bandwidth_3db(f[ok], qlnp[ok])
    with np.errstate(invalid="ignore", divide="ignore"):
        audio_cut = ok & (bw < 2 * plan.audio_hz)
        audio_db = np.where(ok, 10 * np.log10(1 + (2 * plan.audio_hz / bw) ** 2), np.nan)
    e_ch = chosen(g.err)
    volts = chosen(g.volts)
    order = sorted(range(len(turns)), key=lambda i: -turns[i])
    switches = []
    for j, a, b in raw_switches:
        skipped = order[order.index(a) + 1:order.index(b)]
        last = f[:j][choice[:j] == a]
        switches.append(TapSwitch(int(turns[a]), int(turns[b]), float(last[-1]) if last.size else math.nan,
                                  float(f[j]), _switch_reason(j, a, b, f, turns, g.c_all, g.reachable,
                                                              skipped, tuner, float(f_high[a]))))
    return ChannelChart(
        frequencies_hz=f, capacitance_all_f=g.c_all, reachable=g.reachable, comfortable=g.comfortable,
        q_loaded_all=g.q_l, channel_tap_index=choice,
        channel_reason=tuple("" if ok[j] else _reason(g.c_all[j], g.below_srf[j], tuner, turns)
                             for j in range(m)),
        capacitance_f=cap, capacitance_error_f=chosen(g.c_err), position_m=pos,
        capacitance_step_f=c_step, position_step_m=pos_step, q_loop=chosen(g.q_loop), q_loaded=ql,
        q_loaded_no_proximity=qlnp, bandwidth_hz=bw, bandwidth_no_proximity_hz=bw_np,
        audio_cut=audio_cut, audio_loss_db=audio_db, error_estimate=e_ch,
        reliable=ok & (e_ch < RELIABLE_BELOW) & ~g.outside,
        edge=ok & (np.nan_to_num(chosen(g.inside.astype(float))) < 0.5), outside_sweep=g.outside,
        effective_height_m=chosen(g.h_e), voltage_v=volts, current_a=volts * 2 * np.pi * f * cap,
        switches=tuple(switches))


def _coverage(spec, sweep: SweepResult, tuner: Tuner, f: np.ndarray, turns) -> Coverage:
    """Stage 2: coverage per tap, its uncertainty, gaps, overlaps and (with gaps) suggested taps."""
    cover = [coverage(_tap_z(sweep, i), tuner.min_f, tuner.max_f, F_MIN_HZ, F_MAX_HZ)
             for i in range(len(turns))]
    f_low = np.array([c[0] for c in cover])
    f_high = np.array([c[1] for c in cover])

    # f ∝ 1/√(L C_total), so δf/f = ε/2 at each end.
    def rel(ends):
        return np.array([np.interp(v, sweep.frequencies_hz, sweep.error_estimate[:, i]) / 2
                         if np.isfinite(v) else np.nan for i, v in enumerate(ends)])

    gaps = _gaps(float(f[0]), float(f[-1]), f_low, f_high)
    margin = max(OVERLAP_MARGIN, float(np.max(sweep.inductance_error)))
    suggestion = suggest_taps(spec, sweep, tuner, float(f[0]), float(f[-1]), margin) if gaps else None
    return Coverage(f_low, f_high, np.column_stack([rel(f_low), rel(f_high)]),
                    np.array(gaps, dtype=float).reshape(-1, 2), tuple(_overlaps(turns, f_low, f_high)),
                    suggestion)


def _model_notes(sweep: SweepResult, held: HeldBackError | None, outside: np.ndarray) -> list[str]:
    notes = []
    if held is None:
        notes.append("no exact solve outside the fit window in this sweep: the lumped model's error "
                     "rests on the sweep's error estimate alone")
    else:
        worst = held.circuit_max_relative_error
        if worst.size and np.nanmax(worst) >= RELIABLE_BELOW:
            notes.append(f"the lumped model is {np.nanmax(worst):.1%} from exact circuit solves at "
                         f"held-back frequencies: its channels are less certain than the sweep's points")
        if held.frequencies_hz.size and held.relative_to_fit in ("inside", "above"):
            notes.append(f"the held-back MoM points lie {held.relative_to_fit} the fit window "
                         f"({held.frequencies_hz.min() / 1e6:.3g}–{held.frequencies_hz.max() / 1e6:.3g} MHz "
                         f"against {sweep.model.fit_hz.min() / 1e6:.3g}–{sweep.model.fit_hz.max() / 1e6:.3g} "
                         "MHz): they do not test the model's extrapolation down to the band's lower channels")
    if np.any(outside):
        notes.append(f"{int(outside.sum())} channels lie above the sweep "
                     f"({float(np.max(sweep.frequencies_hz)) / 1e3:.0f} kHz): their model points are not trusted")
    return notes


def _chart_notes(chart: ChannelChart, cov: Coverage, turns) -> list[str]:
    """Why the switch points lie where they do, edge channels, and taps the chart does not use
    (consistent with the gaps: never "not needed" while a gap remains)."""
    notes = [f"tap chart rule: {chart.rule}"]
    for s in chart.switches:
        notes.append(f"switch tap {s.from_tap} → {s.to_tap} between {s.last_hz / 1e3:.0f} and "
                     f"{s.first_hz / 1e3:.0f} kHz: {s.reason}")
    n_edge = int(chart.edge.sum())
    if n_edge:
        notes.append(f"{n_edge} channel{'s are' if n_edge > 1 else ' is'} tuned within the model's "
                     f"uncertainty of a tuner range end: {'they' if n_edge > 1 else 'it'} may not be "
                     "reachable on the real loop")
    ok = chart.channel_tap_index >= 0
    unused = [n for i, n in enumerate(turns) if not np.any(chart.channel_tap_index == i)]
    if unused and np.any(ok):
        which = f"tap{'s' if len(unused) > 1 else ''} {', '.join(map(str, unused))}"
        are = "are" if len(unused) > 1 else "is"
        if cov.gaps_hz.size:
            notes.append(f"{which} {are} not used: {'they tune' if len(unused) > 1 else 'it tunes'} no "
                         "channel of the band that the chart does not already tune on a tap with more "
                         f"turns, and {'do' if len(unused) > 1 else 'does'} not close the gap"
                         f"{'s' if len(cov.gaps_hz) > 1 else ''} (see the suggested taps)")
        else:
            notes.append(f"{which} {are} not used for this band: the taps with more turns tune every "
                         f"channel {'they' if len(unused) > 1 else 'it'} would, inside the tuner's range "
                         "with the margin")
    return notes


def run_tune(spec, sweep: SweepResult, band="itu-1", field_v_per_m: float = 1e-3) -> TuneResult:
    """Coverage per tap, the channel chart, bandwidth and tuner voltage of a loop spec.

    Parameters
    ----------
    spec : simloop.spec.Spec
        Its ``tuner`` (None: :data:`simloop.tuner.DEFAULT_TUNER`, and the result says so) and its
        winding (for tap suggestions).
    sweep : SweepResult
        The impedance sweep of the same spec; its fitted model gives every frequency.
    band : str or (float, float, float) or BandPlan
        ``itu-1``, ``itu-2``, ``itu-3`` or a raster (start, stop, step) [Hz]
        (see :func:`band_plan`).
    field_v_per_m : float
        Incident field strength for the tuner voltage. [V/m]

    Raises
    ------
    SpecError
        ``"--band"`` for a bad band, ``"--field"`` for a field that is not > 0.
    """
    plan = band_plan(band)
    if not (field_v_per_m > 0 and math.isfinite(field_v_per_m)):
        raise SpecError("--field", f"{field_v_per_m} V/m must be a field strength > 0 (e.g. 1mV/m)")
    tuner = tuner_from_spec(spec.tuner)
    turns = tuple(int(n) for n in sweep.tap_turns)
    f = np.asarray(plan.frequencies_hz, dtype=float)
    notes: list[str] = []
    if tuner.source == "default":
        notes.append("the spec has no [tuner]: assumed " + tuner.describe())

    grid = _evaluate_taps(sweep, tuner, f, turns, field_v_per_m)
    cov = _coverage(spec, sweep, tuner, f, turns)
    choice, raw = assign_taps(turns, grid.reachable, grid.comfortable)
    chart = _chart(grid, choice, raw, f, turns, tuner, plan, cov.f_high_hz)
    if np.any(~(choice >= 0)) and not cov.gaps_hz.size:
        notes.append("some channels inside the taps' coverage could not be tuned below the "
                     "self-resonance or without a second switch back")

    f_curve = np.linspace(0.9 * f[0], 1.06 * f[-1], 600)
    idx = np.arange(len(turns))
    c_curve = tuning_capacitance(sweep.model_z(f_curve, proximity=True)[:, idx, idx], f_curve[:, None])
    for i in range(len(turns)):
        c_curve[_first_branch(c_curve[:, i]):, i] = np.nan

    held = held_back_error(sweep, (float(f[0]), float(f[-1])))
    notes += _model_notes(sweep, held, grid.outside)
    notes += _chart_notes(chart, cov, turns)
    ok = choice >= 0
    imperial = bool(getattr(spec, "imperial", False))
    notes.extend(_tuner_notes(tuner, chart.position_m, ok, chart.position_step_m, f, imperial))
    return TuneResult(
        name=sweep.name, band=plan, tuner=tuner, field_v_per_m=float(field_v_per_m), tap_turns=turns,
        self_resonance_hz=np.asarray(sweep.self_resonance_hz, dtype=float),
        self_capacitance_f=np.asarray(sweep.self_capacitance_f, dtype=float),
        inductance_h=np.asarray(sweep.inductance_h, dtype=float),
        inductance_error=np.asarray(sweep.inductance_error, dtype=float),
        coverage=cov, chart=chart, curve_frequencies_hz=f_curve, curve_capacitance_f=c_curve,
        model_error=held, fit_hz=np.asarray(sweep.model.fit_hz, dtype=float),
        sweep_range_hz=(float(np.min(sweep.frequencies_hz)), float(np.max(sweep.frequencies_hz))),
        cautions=tuple(_cautions(tuner, f, ok, chart.q_loaded, chart.capacitance_f, choice, turns)),
        notes=tuple(notes), imperial=imperial, tap_wire_m=_tap_wire_m(sweep))


def _tap_wire_m(sweep: SweepResult) -> np.ndarray | None:
    """Winding wire from the start terminal to each tap, (k,). [m]"""
    geom = getattr(sweep, "geometry", None)
    if geom is None:
        return None
    winding = np.array(geom.kinds) == "winding"
    return np.array([float(geom.lengths_m[winding & (geom.turn < n)].sum()) for n in sweep.tap_turns])


def _cautions(tuner: Tuner, f, ok, ql, cap, choice, turns) -> list[str]:
    """The transmit high-voltage caution, with this loop's numbers."""
    out = []
    if np.any(ok):
        # Fed with power P at resonance, the loop current is √(P/R) with R = X/Q_L, so the
        # capacitor sees V = √(P · Q_L · X_C), X_C = 1/(ωC).
        x_c = 1.0 / (2 * np.pi * f * cap)
        v_per_sqrt_w = np.sqrt(ql * x_c)
        j = int(np.nanargmax(np.where(ok, v_per_sqrt_w, -np.inf)))
        parts = ", ".join(f"{p:g} W → {v_per_sqrt_w[j] * math.sqrt(p):,.0f} V rms "
                          f"({v_per_sqrt_w[j] * math.sqrt(2 * p):,.0f} V peak)" for p in CAUTION_POWERS_W)
        p_kv = 1e6 / v_per_sqrt_w[j] ** 2
        out.append(
            "HIGH VOLTAGE if this loop is ever used to transmit: the resonant voltage across the "
            f"tuning capacitor is √(P·Q·X); here, at {f[j] / 1e3:.0f} kHz on tap {turns[choice[j]]} "
            f"(Q {ql[j]:.0f}), {parts}; 1 kV rms at {p_kv:.3g} W. A receiving capacitor (and any "
            "home-built plate capacitor) will arc, and the voltage on the capacitor and the "
            "winding can burn or shock. Never feed a transmitter into it.")
    if isinstance(tuner, PlateTuner):
        out.append(
            f"The sliding-plate capacitor's {tuner.dielectric_thickness_m * 1e3:.3g} mm dielectric is "
            "a receiving part: keep it away from mains, chargers and transmitters.")
    return out


def _tuner_notes(tuner: Tuner, pos, ok, pos_step, f, imperial: bool = False) -> list[str]:
    """Notes on a plate tuner: slide span used, hand resolution, fringing, air layers, its Q."""
    if not isinstance(tuner, PlateTuner):
        return [f"capacitor Q {tuner.q:.4g}: {tuner.q_source}"]
    t = tuner

    def ln(x):
        return format_length(x, imperial)

    out = [f"capacitor Q {t.q:.4g}: {t.q_source}"]
    used = pos[ok & np.isfinite(pos)]
    if used.size:
        frac = (used.max() - used.min()) / t.max_overlap_m
        out.append(f"the band uses the slide from {ln(used.min())} to {ln(used.max())}, "
                   f"{frac:.0%} of its {ln(t.max_overlap_m)}")
        fine = ok & np.isfinite(pos_step) & (pos_step < SLIDE_RESOLUTION_M)
        if np.any(fine):
            c_need = float(np.nanmax(np.where(ok, t.capacitance_f(pos), np.nan))) * 1.1
            out.append(
                f"the slide moves less than {SLIDE_RESOLUTION_M * 1e3:.1f} mm per channel on "
                f"{int(fine.sum())} channels (as little as {np.nanmin(pos_step[fine]) * 1e3:.2f} mm at "
                f"{f[fine][np.nanargmin(pos_step[fine])] / 1e3:.0f} kHz): too fine to set by hand. "
                f"A dielectric of {ln(t.thickness_for(c_need))} (same material and plates) would spread "
                "the band over the whole travel, or use a screw drive")
        xmin = float(used.min())
        if xmin > 0:
            fr = float(fringing_excess_palmer1937(xmin, t.dielectric_thickness_m)
                       + fringing_excess_palmer1937(t.plate_width_m, t.dielectric_thickness_m))
            out.append(f"fringing is neglected in the plate law: Palmer's edge correction (Palmer 1937; "
                       f"approximate, an upper bound for a film dielectric) puts it at {fr:.1%} at the "
                       f"smallest overlap used ({ln(xmin)})")
    air = 1 - float(air_layer_factor(t.dielectric_thickness_m, t.permittivity, 10e-6))
    out.append(f"an air layer of 10 µm between dielectric and plate would lower the capacitance by "
               f"{air:.0%}: press the plates flat and calibrate the scale against a capacitance meter")
    if t.travel_m > t.plate_length_m:
        out.append(f"the travel ({ln(t.travel_m)}) exceeds the plate length ({ln(t.plate_length_m)}): "
                   f"the last {ln(t.travel_m - t.plate_length_m)} add no capacitance")
    return out
