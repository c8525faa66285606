"""Segmentation of a loop geometry into NEC wires, and the rules a trustworthy mesh obeys.

The rules (NEC-2 User's Guide, Burke & Poggio 1981, sec. II, and what we measured with PyNEC 2.3.4
on 10-turn MW coils):

* Δ ≤ 0.05 λ at the highest frequency solved (critical regions; 0.1 λ elsewhere).
* Δ/a ≥ 8 for the thin-wire kernel to be within 1 %; below 2 it is invalid.
* Δ ≲ 2 × pitch on closely wound turns, or the inductance comes out low (measured: Δ/pitch =
  5 / 3.3 / 2.5 / 1.67 gave -8…-10 / -3.4…-4 / -1.3…-2.1 / -0.7…-1.2 %).
* Δ ≥ 7e-5 λ (never below 5e-5 λ) at every frequency solved directly: below it the reactance
  breaks down with random sign (low-frequency breakdown of the EFIE in double precision).
* One segment length everywhere, leads included: a single coarse lead segment cost 5 % of L.

The two middle rules collide across most of the MW band for close-wound coils; :mod:`simloop.sweep`
resolves it by solving only where both hold and evaluating a fitted physical model elsewhere.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field

import numpy as np

from simloop.constants import MAX_SEGMENTS  # noqa: F401 - the cap, defined once (docs/references.md §13)
from simloop.constants import SPEED_OF_LIGHT_M_S as C0  # speed of light [m/s]
from simloop.geometry import DROP, WINDING, LoopGeometry


#: quality -> (segment length as a multiple of the pitch, segments per turn at least). The pitch
#: factors sit at measured inductance biases (docs/notes/pynec.md): 2.5 → about −2 % (draft),
#: 1.67 → about −1 % (standard), 1.25 below that (fine, extrapolated with exponent 1.5).
QUALITY = {"draft": (2.5, 24), "standard": (5.0 / 3.0, 36), "fine": (1.25, 48)}

#: Low-frequency floor: segment length in wavelengths below which direct MoM reactance is not
#: trusted (measured with PyNEC 2.3.4: L error ≤ 0.1 % at 1e-4 λ, 0.1–1 % at 5e-5 λ).
FLOOR_TRUSTED = 7e-5
FLOOR_ABSOLUTE = 5e-5

#: Longest segment at the top frequency, in wavelengths: 0.05 λ in critical regions passes, up to
#: 0.1 λ (the guide's limit elsewhere) warns (NEC-2 User's Guide, Burke & Poggio 1981, sec. II). [-]
WAVELENGTH_PASS, WAVELENGTH_WARN = 0.05, 0.1
#: Shortest segment over wire radius: ≥ 8 keeps the thin-wire kernel within 1 %, below 2 it is
#: invalid (Burke & Poggio 1981, sec. II). [-]
KERNEL_PASS, KERNEL_WARN = 8.0, 2.0
#: Winding segment over pitch: ≤ 2 passes, ≤ 3.4 warns (measured with PyNEC 2.3.4 on 10-turn MW
#: coils, L bias about −2 % at 2.5 and −4 % at 3.3; docs/notes/pynec.md). [-]
PITCH_PASS, PITCH_WARN = 2.0, 3.4
#: Longest over shortest segment above which the mesh is not uniform (a single coarse lead segment
#: cost 5 % of L in our PyNEC measurements; docs/notes/pynec.md). [-]
UNIFORM_LIMIT = 2.0
#: Segments above which a solve warns for its time and memory (:func:`solve_cost`: about 70 s and
#: 1.2 GB per frequency on one core, measured for this project). [-]
SIZE_WARN = 6000



def solve_cost(n_segments: float) -> tuple[float, float]:
    """CPU time and memory of one frequency with PyNEC 2.3.4 on one core. [s], [B]

    Measured for this project (fill + LU); the memory is dominated by the complex matrix and its
    factorisation copy, 32 bytes per matrix element, plus about 75 MB for the process.
    """
    n = float(n_segments)
    return 1.8e-7 * n**2 + 2.9e-10 * n**3, 75e6 + 32.0 * n**2


def estimate_segments(width_m: float, height_m: float, turns: float, pitch_m: float, style: str,
                      quality: str, stop_hz: float, segment_length_m: float | None = None) -> tuple[float, str]:
    """Lower bound of a spec's segment count, from the spec's numbers alone (nothing is built).

    The winding alone (leads left out) is cut at the longest segment the mesh rules of
    :func:`target_segment_m` allow, so the true mesh has at least this many segments. Used to
    refuse a spec too large to solve before its geometry (whose clearance check grows as the
    square of the number of pieces) is built.

    Returns
    -------
    (segments, limit) : (float, str)
        The bound (may be inf for absurd input) and which rule sets the segment length:
        ``"segment_length"``, ``"turn"`` (segments per turn), ``"pitch"`` or ``"wavelength"``.
    """
    perimeter = 2.0 * (float(width_m) + float(height_m))
    try:
        t = float(turns)
    except OverflowError:
        t = float("inf")
    if style == "spiral":  # each turn inset by the pitch on every side: 8·pitch shorter than the last
        length = max(t * perimeter - 4.0 * pitch_m * t * (t - 1.0), perimeter)
    else:
        length = t * perimeter
    if segment_length_m is not None:
        return length / float(segment_length_m), "segment_length"
    pitch_factor, per_turn = QUALITY[quality]
    limits = {"turn": perimeter / per_turn, "wavelength": WAVELENGTH_PASS * C0 / float(stop_hz)}
    if t > 1:
        limits["pitch"] = pitch_factor * float(pitch_m)
    limit = min(limits, key=limits.get)
    return length / limits[limit], limit


@dataclass(frozen=True)
class Mesh:
    """NEC wires with their segment counts; every tuner port is a wire of one segment.

    Attributes
    ----------
    starts, ends : ndarray, shape (m, 3)
        Wire end points (one NEC tag per wire, tag = index + 1). [m]
    segments : ndarray of int, shape (m,)
        Segments per wire.
    radius_m : float
        Wire radius. [m]
    port_tags : tuple of int
        NEC tag of each tap's port wire, in tap order.
    piece : ndarray of int, shape (m,)
        Geometry piece each wire was cut from.
    target_m : float
        Segment length the mesh aimed at. [m]
    """

    starts: np.ndarray
    ends: np.ndarray
    segments: np.ndarray
    radius_m: float
    port_tags: tuple[int, ...]
    piece: np.ndarray
    target_m: float
    quality: str
    winding_wire: np.ndarray = field(repr=False)

    @property
    def n_segments(self) -> int:
        """Total number of segments."""
        return int(self.segments.sum())

    @property
    def segment_lengths_m(self) -> np.ndarray:
        """Segment length of each wire. [m]"""
        return np.linalg.norm(self.ends - self.starts, axis=1) / self.segments

    @property
    def shortest_m(self) -> float:
        """Shortest segment. [m]"""
        return float(self.segment_lengths_m.min())

    @property
    def longest_m(self) -> float:
        """Longest segment. [m]"""
        return float(self.segment_lengths_m.max())

    @property
    def winding_segment_m(self) -> float:
        """Longest segment on the winding (the one the pitch rule is about). [m]"""
        return float(self.segment_lengths_m[self.winding_wire].max())

    def floor_frequency_hz(self, floor: float = FLOOR_TRUSTED) -> float:
        """Lowest frequency at which every segment is at least ``floor`` wavelengths long. [Hz]"""
        return floor * C0 / self.shortest_m

    def digest(self) -> str:
        """Content hash of the mesh (coordinates rounded to 1 nm)."""
        h = hashlib.sha256()
        for arr in (np.round(self.starts, 9), np.round(self.ends, 9)):
            h.update(np.ascontiguousarray(arr + 0.0).tobytes())
        h.update(self.segments.astype(np.int64).tobytes())
        h.update(repr((round(self.radius_m, 12), self.port_tags)).encode())
        return h.hexdigest()

    def as_payload(self) -> dict:
        """Plain data for a solver worker process (SWIG objects do not pickle)."""
        return {
            "starts": self.starts.tolist(),
            "ends": self.ends.tolist(),
            "segments": [int(s) for s in self.segments],
            "radius_m": float(self.radius_m),
            "port_tags": [int(t) for t in self.port_tags],
        }


def target_segment_m(geom: LoopGeometry, quality: str, stop_hz: float, turns: int,
                     perimeter_m: float) -> float:
    """Segment length a mesh of the given quality aims at. [m]"""
    pitch_factor, per_turn = QUALITY[quality]
    kinds = np.array(geom.kinds)
    # No lead piece may be shorter than a segment; the shallowest drop holds three segments (two
    # at draft quality, where its three port-length segments are then shorter than the rest).
    per_drop = 2.0 if quality == "draft" else 3.0
    delta = min(perimeter_m / per_turn, float(geom.lengths_m[kinds == DROP].min()) / per_drop)
    if turns > 1:
        delta = min(delta, pitch_factor * geom.pitch_m)
    return min(delta, WAVELENGTH_PASS * C0 / stop_hz)


def segment_rule(geom: LoopGeometry, quality: str, stop_hz: float, turns: int) -> str:
    """Which rule of :func:`target_segment_m` sets the segment length (for the mesh report).

    A single turn has no neighbouring turn, so the pitch rule does not apply to it.
    """
    pitch_factor, per_turn = QUALITY[quality]
    kinds = np.array(geom.kinds)
    perimeter = float(geom.lengths_m[(kinds == WINDING) & (geom.turn == 0)].sum())
    per_drop = 2.0 if quality == "draft" else 3.0
    options = {f"{per_turn} segments per turn (perimeter / {per_turn})": perimeter / per_turn,
               f"the shallowest lead drop in {per_drop:g} segments": float(geom.lengths_m[kinds == DROP].min()) / per_drop,
               "0.05 λ at the top frequency": WAVELENGTH_PASS * C0 / stop_hz}
    if turns > 1:
        options[f"{pitch_factor:g} × pitch (neighbouring turns)"] = pitch_factor * geom.pitch_m
    rule = min(options, key=options.get)
    return rule + ("" if turns > 1 else "; a single turn has no neighbouring turn, so no pitch rule")


def build_mesh(geom: LoopGeometry, target_m: float, quality: str = "standard",
               port_length_m: float | None = None) -> Mesh:
    """Cut every piece into segments as close to ``target_m`` as whole numbers allow.

    Each tap's drop is cut into three wires: the port, a single segment in the middle of the drop,
    and the parts before and after it, all in segments of one length (the shallowest drop cut
    into an odd number ≥ 3 of segments), so the Y matrix is not made asymmetric by unequal port
    segments or unequal neighbours. ``port_length_m`` imposes the port segment length instead
    (to mesh one tap's circuit exactly as it is meshed inside the full loop).
    """
    lengths = geom.lengths_m
    kinds = np.array(geom.kinds)
    if port_length_m is None:
        shallowest = float(lengths[kinds == DROP].min())
        n_port = max(3, int(round(shallowest / target_m)) | 1)  # odd: one segment in the middle
        port_len = shallowest / n_port
    else:  # the caller's port length (drops must be whole multiples of it)
        port_len = float(port_length_m)
    starts, ends, segs, piece, winding = [], [], [], [], []
    port_tags = [0] * len(geom.tap_turns)

    def add(p, q, n, k):
        starts.append(p)
        ends.append(q)
        segs.append(max(1, int(n)))
        piece.append(k)
        winding.append(geom.kinds[k] == WINDING)

    for k, (p, q, length) in enumerate(zip(geom.starts, geom.ends, lengths)):
        if geom.kinds[k] == DROP:
            # Every drop is a whole number of port-length segments (drop depths are multiples of
            # the shallowest), so each port sits between neighbours of its own length: the source
            # sees the same local mesh at every tap and Y stays symmetric.
            n_drop = max(1, int(round(length / port_len)))
            before = n_drop // 2
            u = (q - p) / length
            a, b = p + before * port_len * u, p + (before + 1) * port_len * u
            if before:
                add(p, a, before, k)
            add(a, b, 1, k)
            port_tags[int(geom.tap[k])] = len(starts)  # 1-based tag of the wire just added
            if n_drop - before - 1:
                add(b, q, n_drop - before - 1, k)
        else:
            add(p, q, round(length / target_m), k)

    return Mesh(
        starts=np.array(starts),
        ends=np.array(ends),
        segments=np.array(segs, dtype=int),
        radius_m=geom.wire_radius_m,
        port_tags=tuple(port_tags),
        piece=np.array(piece, dtype=int),
        target_m=float(target_m),
        quality=quality,
        winding_wire=np.array(winding, dtype=bool),
    )


@dataclass(frozen=True)
class Rule:
    """One mesh rule with its verdict: ``"pass"``, ``"warn"`` or ``"fail"``."""

    name: str
    status: str
    detail: str
    #: The rule's identity: ``"wavelength"``, ``"kernel"``, ``"pitch"``, ``"uniform"``,
    #: ``"floor"`` or ``"size"`` (``name`` is its sentence, for people).
    key: str = ""


def mesh_rules(mesh: Mesh, geom: LoopGeometry, start_hz: float, stop_hz: float, turns: int) -> list[Rule]:
    """Check a mesh against the rules in this module's docstring for a sweep start…stop."""
    rules = []
    lam_top = C0 / stop_hz
    ratio = mesh.longest_m / lam_top
    rules.append(Rule("segment <= 0.05 wavelength at the top frequency",
                      "pass" if ratio <= WAVELENGTH_PASS else ("warn" if ratio <= WAVELENGTH_WARN else "fail"),
                      f"longest segment {mesh.longest_m * 1e3:.2f} mm = {ratio:.2e} λ at {stop_hz / 1e6:.3f} MHz",
                      "wavelength"))
    da = mesh.shortest_m / mesh.radius_m
    rules.append(Rule("thin-wire kernel: segment/radius >= 8",
                      "pass" if da >= KERNEL_PASS else ("warn" if da >= KERNEL_WARN else "fail"),
                      f"shortest segment / radius = {da:.1f} (< 2 invalid, 2–8 over 1 % error)", "kernel"))
    if turns > 1:
        rp = mesh.winding_segment_m / geom.pitch_m
        rules.append(Rule("segment <= 2 x pitch on the winding",
                          "pass" if rp <= PITCH_PASS else ("warn" if rp <= PITCH_WARN else "fail"),
                          f"winding segment / pitch = {rp:.2f} (measured L bias: 2.5 → about -2 %, "
                          f"3.3 → -4 %, 5 → -9 %)", "pitch"))
    spread = mesh.longest_m / mesh.shortest_m
    rules.append(Rule("uniform segment length (leads included)",
                      "pass" if spread <= UNIFORM_LIMIT else "warn",
                      f"longest / shortest segment = {spread:.2f}", "uniform"))
    f_floor = mesh.floor_frequency_hz(FLOOR_TRUSTED)
    if f_floor <= start_hz:
        status, detail = "pass", f"every sweep point is above {f_floor / 1e6:.3f} MHz (Δ ≥ 7e-5 λ)"
    else:
        status = "warn"
        detail = (f"direct MoM reactance is trusted only above {f_floor / 1e6:.3f} MHz (Δ ≥ 7e-5 λ); "
                  f"sweep points below it come from the circuit solver")
    rules.append(Rule("low-frequency floor: segment >= 7e-5 wavelength", status, detail, "floor"))
    n = mesh.n_segments
    seconds, memory_b = solve_cost(n)
    rules.append(Rule("size", "pass" if n <= SIZE_WARN else ("warn" if n <= MAX_SEGMENTS else "fail"),
                      f"{n} segments: about {seconds:.1f} s and {memory_b / 1e6:.0f} MB per frequency "
                      f"(PyNEC 2.3.4, one core); at most {MAX_SEGMENTS} are solved", "size"))
    return rules


def mesh_for_spec(spec, geom: LoopGeometry) -> Mesh:
    """Mesh a spec's geometry at the spec's quality, or at its explicit segment length."""
    perimeter = 2 * (spec.frame.width_m + spec.frame.height_m)
    if spec.mesh.segment_length_m is not None:
        target = spec.mesh.segment_length_m
    else:
        target = target_segment_m(geom, spec.mesh.quality, spec.sweep.stop_hz, spec.winding.turns, perimeter)
    return build_mesh(geom, target, spec.mesh.quality)
