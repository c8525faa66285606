"""Wire path of a rectangular multi-turn frame loop with its start terminal, taps and tuner leads.

Coordinates follow DESIGN §2: the loop plane is x–z (x across the frame, z up), the loop axis is y,
the origin is the centre of the frame midway along the winding.

Path of one turn (``stacked``: every turn the same rectangle at its own y; ``spiral``: all turns in
the plane y = 0, each inset by the pitch). Each turn starts and ends at the middle of the bottom
side, so the start terminal and every tap lie on one line and one lead construction serves both
styles::

    P0 (bottom middle) -> P1 (bottom right) -> P2 (top right) -> P3 (top left) -> P4 (bottom left)
    -> P0 of the next turn

The turn-to-turn advance happens on the last piece, P4 -> next P0, spread over half the bottom side
(a slope of pitch/(width/2), no short jog).

Leads. Tap points T_n (after n turns) sit at S + n·pitch·a, where S is the start terminal and a the
direction in which the winding advances (+y stacked, +z spiral). With o the direction away from the
winding (-z stacked: below the frame; +y spiral: off its plane), e the lead offset and
d_i = e·(1 + i) the depth of tap i's lead:

* a link ``S -> B = S - e a`` takes the start terminal clear of the winding,
* a collector ``B -> B + d_0 o -> ... -> B + d_{k-1} o`` descends from it,
* tap i has a drop ``T_n -> T_n + d_i o`` (the tuner port sits in its middle) and a run
  ``T_n + d_i o -> B + d_i o`` back to the collector.

Higher taps drop deeper and their runs pass beneath the ends of the shallower leads, so no lead
crosses or touches another or the winding, and every lead piece is at least e long. That matters:
one segment much shorter than the rest sets the low-frequency breakdown of the whole model (a 6 mm
lead piece on a 1 m loop halved its MoM inductance at 1 MHz).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from simloop.errors import SpecError

#: Kinds of straight piece in a loop path.
WINDING, DROP, RUN, COLLECTOR = "winding", "drop", "run", "collector"


@dataclass(frozen=True)
class LoopGeometry:
    """Straight pieces of wire making up a loop with its leads.

    Attributes
    ----------
    starts, ends : ndarray, shape (n, 3)
        End points of each piece. [m]
    kinds : tuple of str
        ``"winding"``, ``"drop"``, ``"run"`` or ``"collector"`` per piece.
    turn : ndarray of int, shape (n,)
        Turn index of winding pieces, -1 for leads.
    tap : ndarray of int, shape (n,)
        Tap index (0-based, in the order of ``tap_turns``) of drop and run pieces, -1 otherwise.
        The link from the start terminal is collector piece 0 (tap -1); collector piece i + 1
        joins depth level i - 1 (the link's end for i = 0) to level i.
    tap_turns : tuple of int
        Turns from the start terminal at each tap.
    wire_radius_m : float
        Wire radius. [m]
    """

    starts: np.ndarray
    ends: np.ndarray
    kinds: tuple[str, ...]
    turn: np.ndarray
    tap: np.ndarray
    tap_turns: tuple[int, ...]
    wire_radius_m: float
    style: str
    pitch_m: float

    @property
    def lengths_m(self) -> np.ndarray:
        """Length of each piece. [m]"""
        return np.linalg.norm(self.ends - self.starts, axis=1)

    def _length_of(self, mask: np.ndarray) -> float:
        return float(self.lengths_m[mask].sum())

    @property
    def winding_length_m(self) -> float:
        """Wire in the winding, start terminal to the end of the last turn. [m]"""
        return self._length_of(np.array([k == WINDING for k in self.kinds]))

    @property
    def lead_length_m(self) -> float:
        """Wire in all tuner leads. [m]"""
        return self._length_of(np.array([k != WINDING for k in self.kinds]))

    @property
    def wire_length_m(self) -> float:
        """All wire in the model, winding and leads. [m]"""
        return float(self.lengths_m.sum())

    def port_piece(self, tap_index: int) -> int:
        """Index of the drop piece of a tap, which carries the tuner port in its middle."""
        return int(np.flatnonzero((self.tap == tap_index) & (np.array(self.kinds) == DROP))[0])

    def current_path(self, tap_index: int) -> tuple[np.ndarray, np.ndarray]:
        """Directed pieces that carry the current of tap ``tap_index`` at low frequency.

        The circuit runs from the start terminal through the winding to the tap, down the tap's
        drop, back along its run and up the collector to the start terminal. Unused turns and the
        other leads are open stubs and carry no current in the quasi-static limit.

        Returns
        -------
        starts, ends : ndarray, shape (m, 3)
            Pieces oriented along the current. [m]
        """
        n_turns = self.tap_turns[tap_index]
        kinds = np.array(self.kinds)
        winding = np.flatnonzero((kinds == WINDING) & (self.turn < n_turns))
        drop = np.flatnonzero((kinds == DROP) & (self.tap == tap_index))
        run = np.flatnonzero((kinds == RUN) & (self.tap == tap_index))
        collector = np.flatnonzero(kinds == COLLECTOR)[: tap_index + 2][::-1]
        forward = np.concatenate([winding, drop, run])
        starts = np.concatenate([self.starts[forward], self.ends[collector]])
        ends = np.concatenate([self.ends[forward], self.starts[collector]])
        return starts, ends

    def turn_area_m2(self) -> np.ndarray:
        """Area enclosed by each turn's centreline (the advance slope neglected). [m²]"""
        kinds = np.array(self.kinds)
        areas = []
        for k in range(int(self.turn.max()) + 1):
            sel = (kinds == WINDING) & (self.turn == k)
            x = np.concatenate([self.starts[sel, 0], self.ends[sel][-1:, 0]])
            z = np.concatenate([self.starts[sel, 2], self.ends[sel][-1:, 2]])
            areas.append(0.5 * abs(np.dot(x[:-1], z[1:]) - np.dot(x[1:], z[:-1])))
        return np.asarray(areas)


def turn_sides_m(style: str, width_m: float, height_m: float, pitch_m: float, turns: int):
    """Centreline sides (width, height) of turns 0 … turns − 1, shape (turns,) each. [m]

    Stacked turns all have the frame's sides; a spiral's turn k is inset by k pitches on every
    side, so its sides are 2k pitches shorter.
    """
    k = np.arange(int(turns))
    inset = 2 * k * pitch_m if style == "spiral" else np.zeros(k.size)
    return width_m - inset, height_m - inset


def _turn_corners(style: str, k: int, width: float, height: float, pitch: float, turns: int):
    """Corner points P0..P4 of turn k and the start of turn k+1."""
    if style == "stacked":
        y0 = (k - turns / 2) * pitch
        y1 = y0 + pitch
        hw, hh = width / 2, height / 2
        return [
            (0.0, y0, -hh), (hw, y0, -hh), (hw, y0, hh), (-hw, y0, hh), (-hw, y0, -hh), (0.0, y1, -hh),
        ]
    inset = k * pitch
    hw, hh = width / 2 - inset, height / 2 - inset
    return [
        (0.0, 0.0, -hh), (hw, 0.0, -hh), (hw, 0.0, hh), (-hw, 0.0, hh), (-hw, 0.0, -hh),
        (0.0, 0.0, -hh + pitch),
    ]


def _add_leads(add, style: str, start, pitch_m: float, tap_turns, lead_offset_m: float, lead_depths_m) -> None:
    """The start terminal's link, and per tap its drop, run and collector piece (``add(p, q, kind, tap=)``)."""
    if style == "stacked":
        advance, away = np.array([0.0, 1.0, 0.0]), np.array([0.0, 0.0, -1.0])
    else:
        advance, away = np.array([0.0, 0.0, 1.0]), np.array([0.0, 1.0, 0.0])
    base = start - lead_offset_m * advance
    add(tuple(start), tuple(base), COLLECTOR)
    previous = base
    for i, (n, depth) in enumerate(zip(tap_turns, lead_depths_m)):
        tap_point = start + n * pitch_m * advance
        drop_end = tap_point + depth * away
        level = base + depth * away
        add(tuple(tap_point), tuple(drop_end), DROP, tap=i)
        add(tuple(drop_end), tuple(level), RUN, tap=i)
        add(tuple(previous), tuple(level), COLLECTOR, tap=i)
        previous = level


def build_loop(
    width_m: float,
    height_m: float,
    turns: int,
    pitch_m: float,
    wire_radius_m: float,
    tap_turns: tuple[int, ...],
    lead_offset_m: float,
    style: str = "stacked",
    lead_depths_m: tuple[float, ...] | None = None,
) -> LoopGeometry:
    """Build the wire path of a rectangular multi-turn loop with taps and tuner leads.

    Parameters
    ----------
    width_m, height_m : float
        Centreline sides of the outer turn. [m]
    turns : int
        Number of turns. [-]
    pitch_m : float
        Centre-to-centre spacing of adjacent turns. [m]
    wire_radius_m : float
        Wire radius. [m]
    tap_turns : tuple of int
        Tap positions in turns from the start terminal, strictly increasing, ≤ turns. [-]
    lead_offset_m : float
        Lead offset e: depth of the shallowest lead below (stacked) or in front of (spiral) the
        winding, the length of the start terminal's link and the spacing of the lead levels. [m]
    style : {"stacked", "spiral"}
        Winding style.
    lead_depths_m : tuple of float, optional
        Depth of each tap's lead; default e·(1 + i). Given explicitly to rebuild one tap's circuit
        on its own. [m]

    Returns
    -------
    LoopGeometry
    """
    if style not in ("stacked", "spiral"):
        raise SpecError("winding.style", f'"{style}" is not a winding style; use "stacked" or "spiral"')
    starts, ends, kinds, turn_of, tap_of = [], [], [], [], []

    def add(p, q, kind, turn=-1, tap=-1):
        starts.append(p)
        ends.append(q)
        kinds.append(kind)
        turn_of.append(turn)
        tap_of.append(tap)

    for k in range(turns):
        pts = _turn_corners(style, k, width_m, height_m, pitch_m, turns)
        for p, q in zip(pts[:-1], pts[1:]):
            add(p, q, WINDING, turn=k)

    start = np.array(_turn_corners(style, 0, width_m, height_m, pitch_m, turns)[0])
    if lead_depths_m is None:
        lead_depths_m = tuple(lead_offset_m * (1 + i) for i in range(len(tap_turns)))
    _add_leads(add, style, start, pitch_m, tap_turns, lead_offset_m, lead_depths_m)

    return LoopGeometry(
        starts=np.array(starts, dtype=float),
        ends=np.array(ends, dtype=float),
        kinds=tuple(kinds),
        turn=np.array(turn_of, dtype=int),
        tap=np.array(tap_of, dtype=int),
        tap_turns=tuple(int(t) for t in tap_turns),
        wire_radius_m=float(wire_radius_m),
        style=style,
        pitch_m=float(pitch_m),
    )




def loop_from_spec(spec, *, turns: int | None = None, tap_turns: tuple[int, ...] | None = None,
                   lead_depths_m: tuple[float, ...] | None = None) -> LoopGeometry:
    """Build the loop geometry described by a :class:`simloop.spec.Spec`.

    ``turns``, ``tap_turns`` and ``lead_depths_m`` replace the spec's (for a loop tapped at one
    turn count, or one tap's own circuit); frame, wire, pitch, lead offset and style always come
    from the spec.
    """
    return build_loop(
        width_m=spec.frame.width_m,
        height_m=spec.frame.height_m,
        turns=spec.winding.turns if turns is None else turns,
        pitch_m=spec.winding.pitch_m,
        wire_radius_m=spec.wire.radius_m,
        tap_turns=spec.taps.turns if tap_turns is None else tap_turns,
        lead_offset_m=spec.leads.offset_m,
        style=spec.winding.style,
        lead_depths_m=lead_depths_m,
    )


def segment_distance_m(p0, p1, q0, q1) -> np.ndarray:
    """Shortest distance between straight segments p0–p1 and q0–q1 (arrays broadcast, shape (..., 3)).

    Closed form of the clamped two-parameter minimisation (e.g. Eberly, *Distance between
    segments*, Geometric Tools), vectorised; degenerate (parallel) pairs handled by clamping.
    """
    p0, p1, q0, q1 = (np.asarray(v, dtype=float) for v in (p0, p1, q0, q1))
    d1, d2, r = p1 - p0, q1 - q0, p0 - q0
    a = np.einsum("...i,...i", d1, d1)
    e = np.einsum("...i,...i", d2, d2)
    f = np.einsum("...i,...i", d2, r)
    c = np.einsum("...i,...i", d1, r)
    b = np.einsum("...i,...i", d1, d2)
    denom = a * e - b * b
    with np.errstate(divide="ignore", invalid="ignore"):
        s = np.where(denom > 1e-14 * a * e, np.clip((b * f - c * e) / denom, 0, 1), 0.0)
        t = (b * s + f) / e
        t_clip = np.clip(t, 0, 1)
        s = np.where(t != t_clip, np.clip((b * t_clip - c) / a, 0, 1), s)
    diff = (p0 + s[..., None] * d1) - (q0 + t_clip[..., None] * d2)
    return np.linalg.norm(diff, axis=-1)


def check_clearances(geom: LoopGeometry) -> list[tuple[str, str]]:
    """Pieces that are not joined must stay at least three wire diameters apart.

    Returns a list of (key, message) problems; empty when the geometry is sound. Pieces sharing an
    end point are joined and exempt.
    """
    n = len(geom.kinds)
    problems = []
    # All pairs at once need ~200 bytes a pair (GBs for a few thousand pieces): take them in
    # blocks of rows of about a million pairs.
    rows = np.arange(n)
    block = max(1, 1_000_000 // max(n, 1))
    for first in range(0, n, block):
        i, j = np.nonzero(rows[first:first + block, None] < rows[None, :])
        i = i + first
        problems += _clearance_block(geom, i, j, 3 - len(problems))
        if len(problems) >= 3:
            break
    return problems


def _clearance_block(geom: LoopGeometry, i, j, most: int) -> list[tuple[str, str]]:
    """Problems among the piece pairs (i, j) (see :func:`check_clearances`), at most ``most``."""
    dist = segment_distance_m(geom.starts[i], geom.ends[i], geom.starts[j], geom.ends[j])
    ends_i = np.stack([geom.starts[i], geom.ends[i]], axis=1)
    ends_j = np.stack([geom.starts[j], geom.ends[j]], axis=1)
    gap = np.linalg.norm(ends_i[:, :, None, :] - ends_j[:, None, :, :], axis=-1).min(axis=(1, 2))
    joined = gap < 1e-9
    kinds = np.array(geom.kinds)
    both_winding = (kinds[i] == WINDING) & (kinds[j] == WINDING)
    # A lead that leaves the winding (shares an end point with a winding piece) starts next to
    # the neighbouring turn, one pitch away, like any two turns: it needs the winding's clearance
    # (no touching) from winding pieces, not more.
    tip = np.concatenate([geom.starts, geom.ends])
    on_winding = np.concatenate([kinds == WINDING, kinds == WINDING])
    wind_pts = tip[on_winding]
    joins = np.array([np.min(np.linalg.norm(wind_pts[:, None, :] - np.stack([p, q])[None], axis=-1)) < 1e-9
                      for p, q in zip(geom.starts, geom.ends)])
    leaving = ((kinds[i] == WINDING) & joins[j] & (kinds[j] != WINDING)) | \
              ((kinds[j] == WINDING) & joins[i] & (kinds[i] != WINDING))
    # Adjacent turns may be close wound (the spec already demands pitch > diameter); anything
    # else involving a lead must keep three diameters, so a lead never grazes the winding.
    limit = np.where(both_winding | leaving, 2.0 * geom.wire_radius_m, 6.0 * geom.wire_radius_m)
    bad = np.flatnonzero(~joined & (dist < limit))
    problems = []
    for b in bad[:most]:
        ki, kj = geom.kinds[i[b]], geom.kinds[j[b]]
        key = "leads.offset" if "winding" not in (ki, kj) or ki != kj else "winding.pitch"
        problems.append(
            (key, f"a {ki} piece and a {kj} piece come within {dist[b] * 1e3:.2f} mm of each other; "
                  f"unjoined wires must stay {limit[b] * 1e3:.2f} mm apart")
        )
    return problems


def rod_clearance_problems(geom: LoopGeometry, position_m, axis, rod_length_m, rod_diameter_m):
    """A receiver rod (a cylinder) must not touch or cross any wire of the loop."""
    centre = np.asarray(position_m, dtype=float)
    axis = np.asarray(axis, dtype=float) / np.linalg.norm(axis)
    a0, a1 = centre - axis * rod_length_m / 2, centre + axis * rod_length_m / 2
    dist = segment_distance_m(a0, a1, geom.starts, geom.ends)
    clearance = rod_diameter_m / 2 + geom.wire_radius_m
    k = int(np.argmin(dist))
    if dist[k] < clearance:
        return [("receiver.position",
                 f"the rod at {tuple(round(float(v), 4) for v in centre)} m comes within "
                 f"{dist[k] * 1e3:.1f} mm of a {geom.kinds[k]} wire; it must clear the wire by more "
                 f"than rod radius + wire radius = {clearance * 1e3:.1f} mm")]
    return []
