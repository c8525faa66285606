r"""Tuning capacitors: a variable of known range, or a home-built sliding-plate capacitor.

Two models, both pure (no printing, no files), both giving the capacitance the tuner can reach,
its loss as a Q, and — for the plate capacitor — the slide position for a capacitance.

``range`` (:class:`RangeTuner`)
    A bought variable capacitor: minimum and maximum capacitance (leads and trimmer included) and
    a Q. Without a ``[tuner]`` section the tool assumes :data:`DEFAULT_TUNER`, a 12–365 pF
    single-gang air-variable (the common broadcast-receiver part; common practice, not a
    measured part).

``plates`` (:class:`PlateTuner`)
    One plate slides between fixed plates with a dielectric sheet in each gap (one moving plate
    between two fixed plates gives two gaps in parallel). The textbook parallel-plate law for the
    overlapping area gives

    .. math:: C(x) = C_{stray} + n_{gaps}\,\frac{\varepsilon_0 \varepsilon_r\, w\, \min(x, l)}{d}

    with ``x`` the slide position measured from where the plates just stop overlapping, ``w`` the
    plate width, ``l`` the plate length and ``d`` the dielectric thickness.

    **Fringing** is neglected. The edge field of a plate pair adds, by Palmer's correction for a
    rectangular capacitor [2] (as the factor :math:`1 + \frac{d}{\pi a}(1 + \ln\frac{2\pi a}{d})`
    per side a), a relative excess of about 2 % at a 10 mm overlap for d = 0.1 mm, less for
    larger overlaps; it is an upper bound here because the fringe field of a film dielectric runs
    mostly in air. :func:`fringing_excess_palmer1937` gives the number so the report can state it.
    A constant part of the edge capacitance is in any case inseparable from the lead stray.

    **Air layers** matter far more than fringing with a thin film: an air layer of thickness t
    between the film and a plate puts d/ε_r and t in series, and the capacitance falls by the
    factor (d/ε_r)/(d/ε_r + t) (:func:`air_layer_factor`): 10 µm of air under 0.1 mm of
    polyester (ε_r ≈ 3.2) takes off 24 %. Press the plates flat, and calibrate the scale.

**Loss.** A capacitor whose field lies in a dielectric of loss tangent tan δ has
Q ≈ 1/tan δ (the dielectric's conductance ωC·tan δ against its susceptance ωC) [1]. A plate
tuner's Q is therefore taken from its dielectric (:data:`DIELECTRICS`, :func:`plate_q`): named
by ``tuner.dielectric``, or, without it, the lowest Q among the listed dielectrics whose
permittivity matches ``tuner.permittivity`` (so that paper is not mistaken for polypropylene,
which has the same ε_r and 20–50 times less loss). ``tuner.q`` overrides it. A low-loss
dielectric does not make a perfect capacitor: the plates, the sliding contact and the leads add
loss, so the Q used is at most :data:`CONSTRUCTION_Q` (an assumption, not measured). Every result
says which Q it used and where it came from (``q_source``).

The values in :data:`DIELECTRICS` are typical of dry material at room temperature near 1 MHz;
they vary with grade, temperature and above all moisture (paper and card). Sources and marks are
listed in ``docs/references.md`` (section "Dielectrics").

References
----------
.. [1] F. E. Terman, *Radio Engineers' Handbook*, McGraw-Hill, 1943, sec. 2 (parallel-plate
   capacitance).
.. [2] H. B. Palmer, "The capacitance of a parallel-plate capacitor by the Schwartz-Christoffel
   transformation," *Trans. AIEE* 56 (1937) 363 (formula quoted from memory).
.. [3] A. R. von Hippel (ed.), *Dielectric Materials and Applications*, MIT Press / Wiley, 1954,
   tables of permittivity and loss tangent (values as remembered; see docs/references.md).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Final

import numpy as np

from simloop.constants import EPSILON0_F_M  # 1/(μ0 c²), docs/references.md §13

__all__ = [
    "DEFAULT_TUNER",
    "DIELECTRICS",
    "EPSILON0_F_M",
    "Dielectric",
    "PlateTuner",
    "RangeTuner",
    "Tuner",
    "CONSTRUCTION_Q",
    "air_layer_factor",
    "dielectric_by_name",
    "dielectrics_near",
    "plate_q",
    "fringing_excess_palmer1937",
    "parallel_plate_capacitance",
    "tuner_from_spec",
]


@dataclass(frozen=True)
class Dielectric:
    """Typical dielectric properties near 1 MHz, dry, room temperature.

    Attributes
    ----------
    key : str
        Name used in ``tuner.dielectric``.
    name : str
        Name for output.
    permittivity : (float, float)
        Range of the relative permittivity ε_r. [-]
    loss_tangent : (float, float)
        Range of tan δ. [-]
    typical_loss_tangent : float
        The value the tool uses. [-]
    source : str
        Where the values come from (short form; full entry in docs/references.md).
    note : str
    """

    key: str
    name: str
    permittivity: tuple[float, float]
    loss_tangent: tuple[float, float]
    typical_loss_tangent: float
    source: str
    note: str = ""

    @property
    def q_range(self) -> tuple[float, float]:
        """Capacitor Q the dielectric allows, 1/tan δ (worst, best). [-]"""
        return 1.0 / self.loss_tangent[1], 1.0 / self.loss_tangent[0]

    @property
    def q(self) -> float:
        """Q of a capacitor with this dielectric alone, 1/tan δ at the typical loss tangent. [-]"""
        return 1.0 / self.typical_loss_tangent

    @property
    def typical_permittivity(self) -> float:
        """Middle of the permittivity range. [-]"""
        return 0.5 * (self.permittivity[0] + self.permittivity[1])


_VH = "von Hippel (1954), tables at 1 MHz; approximate (quoted from memory)"

#: Dielectrics a home builder uses in a sliding-plate capacitor (typical values near 1 MHz; see
#: the module notes and docs/references.md, section "Dielectrics", for sources and marks).
DIELECTRICS: Final[tuple[Dielectric, ...]] = (
    Dielectric("air", "air", (1.0006, 1.0006), (1e-6, 1e-5), 1e-5, "textbook value; approximate",
               "the loss is in the plates and contacts"),
    Dielectric("ptfe", "PTFE film", (2.0, 2.1), (1e-4, 3e-4), 2e-4,
               "DuPont Teflon PTFE data: dissipation factor < 0.0002 at 1 MHz; approximate (from memory)"),
    Dielectric("polypropylene", "polypropylene film", (2.2, 2.3), (2e-4, 5e-4), 3e-4,
               "film-capacitor makers' data; approximate (from memory)"),
    Dielectric("polyethylene", "polyethylene film", (2.25, 2.35), (1e-4, 5e-4), 2e-4, _VH),
    Dielectric("polystyrene", "polystyrene sheet", (2.4, 2.6), (1e-4, 4e-4), 2e-4, _VH),
    Dielectric("polyester", "polyester (PET) film", (3.0, 3.3), (1e-2, 2e-2), 1.6e-2,
               "DuPont Teijin Films, Mylar electrical properties bulletin: dissipation factor 0.016 at 1 MHz; approximate (from memory)"),
    Dielectric("kraft-paper", "kraft paper, dry", (2.0, 3.5), (5e-3, 2e-2), 1e-2, _VH,
               "absorbs moisture: ε_r and loss rise with humidity"),
    Dielectric("card", "card / pressboard, dry", (3.0, 4.5), (1e-2, 5e-2), 3e-2, _VH,
               "absorbs moisture: ε_r and loss rise with humidity"),
    Dielectric("glass", "window (soda-lime) glass", (6.0, 8.0), (5e-3, 1e-2), 8e-3, _VH),
)

#: Highest Q the tool assumes for a home-built plate capacitor, whatever its dielectric: the
#: plates, sliding contact and leads add loss (an assumption, not a measured value).
CONSTRUCTION_Q: Final = 1000.0


def dielectric_by_name(key: str) -> Dielectric:
    """The entry of :data:`DIELECTRICS` with this ``key`` (KeyError if none)."""
    for d in DIELECTRICS:
        if d.key == key:
            return d
    raise KeyError(key)


def plate_q(permittivity: float, dielectric: str | None = None) -> tuple[float, str]:
    """Q of a home-built plate capacitor from its dielectric, and where it came from.

    Q = min(1/tan δ, :data:`CONSTRUCTION_Q`) for the named dielectric; without a name, for the
    lossiest listed dielectric whose permittivity matches (the cautious choice); without a match,
    :data:`CONSTRUCTION_Q`.

    Returns
    -------
    (float, str)
        Q [-] and a sentence saying how it was chosen.
    """
    if dielectric is not None:
        d = dielectric_by_name(dielectric)
        why = f"from the dielectric ({d.name}: tan δ ≈ {d.typical_loss_tangent:g}, Q ≈ 1/tan δ = {d.q:.0f}"
    else:
        near = dielectrics_near(permittivity)
        solid = [d for d in near if d.key != "air"]
        if not solid:
            return CONSTRUCTION_Q, (f"assumed {CONSTRUCTION_Q:.0f}: no listed dielectric has ε_r near "
                                    f"{permittivity:g}; give tuner.dielectric or tuner.q")
        d = min(solid, key=lambda x: x.q)
        others = ", ".join(x.name for x in solid if x is not d)
        why = (f"from the dielectric: ε_r {permittivity:g} matches {d.name}"
               + (f" (also {others}; the lossiest is taken: name it with tuner.dielectric)" if others else "")
               + f", tan δ ≈ {d.typical_loss_tangent:g}, Q ≈ 1/tan δ = {d.q:.0f}")
    if d.q > CONSTRUCTION_Q:
        return CONSTRUCTION_Q, why + f"; capped at {CONSTRUCTION_Q:.0f} for the plates and contacts)"
    return d.q, why + ")"


def dielectrics_near(permittivity: float, tolerance: float = 0.1) -> list[Dielectric]:
    """Dielectrics of :data:`DIELECTRICS` whose permittivity range lies within ``tolerance``
    (relative) of ``permittivity``."""
    out = []
    for d in DIELECTRICS:
        lo, hi = d.permittivity
        if lo * (1 - tolerance) <= permittivity <= hi * (1 + tolerance):
            out.append(d)
    return out


def parallel_plate_capacitance(area_m2, thickness_m, permittivity=1.0, gaps=1):
    r"""Textbook parallel-plate capacitance, C = n ε0 ε_r A / d, fringing neglected.

    Parameters
    ----------
    area_m2 : array_like
        Overlapping plate area per gap. [m²]
    thickness_m : array_like
        Dielectric thickness d (> 0). [m]
    permittivity : array_like
        Relative permittivity ε_r of the dielectric. [-]
    gaps : int
        Dielectric gaps in parallel n (a moving plate between two fixed plates: 2). [-]

    Returns
    -------
    ndarray
        Capacitance. [F]

    References
    ----------
    .. [1] F. E. Terman, *Radio Engineers' Handbook*, McGraw-Hill, 1943, sec. 2.
    """
    d = np.asarray(thickness_m, dtype=float)
    if np.any(d <= 0):
        raise ValueError("thickness_m must be > 0")
    return gaps * EPSILON0_F_M * np.asarray(permittivity, dtype=float) * np.asarray(area_m2, dtype=float) / d


def fringing_excess_palmer1937(side_m, thickness_m):
    r"""Relative capacitance excess from the fringe at a pair of opposite edges, Palmer (1937).

    .. math:: \frac{d}{\pi a}\left(1 + \ln\frac{2\pi a}{d}\right)

    for a side of length a (the factor for the other pair of edges multiplies); the formula is
    quoted from memory (approximate). Returns 0 for a side of zero length (no overlap, no parallel-plate part).
    """
    a = np.asarray(side_m, dtype=float)
    d = float(thickness_m)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = d / (np.pi * a) * (1 + np.log(2 * np.pi * a / d))
    return np.where(a > 0, out, 0.0)


def air_layer_factor(thickness_m, permittivity, air_m):
    r"""Fraction of the capacitance left when an air layer lies in series with the dielectric.

    .. math:: \frac{d/\varepsilon_r}{d/\varepsilon_r + t}
    """
    electric = np.asarray(thickness_m, dtype=float) / np.asarray(permittivity, dtype=float)
    return electric / (electric + np.asarray(air_m, dtype=float))


@dataclass(frozen=True)
class RangeTuner:
    """A variable capacitor given by its range.

    Attributes
    ----------
    min_f, max_f : float
        Lowest and highest capacitance, leads and strays included. [F]
    q : float
        Capacitor Q (loss as a parallel conductance ωC/Q). [-]
    source : {"spec", "default"}
        Whether the values came from the spec's ``[tuner]`` or the documented default.
    """

    min_f: float
    max_f: float
    q: float
    source: str = "spec"
    kind: str = "range"
    q_source: str = "given in the spec (tuner.q)"

    @property
    def has_position(self) -> bool:
        return False

    def describe(self, imperial: bool = False) -> str:
        """One line for the user (``imperial`` is accepted for symmetry: no lengths here)."""
        what = ("default tuner (no [tuner] in the spec): a 12–365 pF single-gang air-variable, "
                "common practice" if self.source == "default" else "variable capacitor")
        return f"{what}, {_c(self.min_f)} to {_c(self.max_f)}, Q {self.q:.4g}; Q {self.q_source}"

    def position_m(self, capacitance_f):
        """No position for a range tuner: NaN everywhere."""
        return np.full(np.shape(capacitance_f), np.nan)


@dataclass(frozen=True)
class PlateTuner:
    """A home-built sliding-plate capacitor (see the module notes for the law and its limits).

    Attributes
    ----------
    plate_width_m, plate_length_m : float
        Width across the slide and length along it of the overlapping plates. [m]
    gaps : int
        Dielectric gaps in parallel. [-]
    dielectric_thickness_m : float
        Thickness d of the dielectric in each gap. [m]
    permittivity : float
        Relative permittivity ε_r of the dielectric. [-]
    travel_m : float
        Slide travel from no overlap. [m]
    stray_f : float
        Stray and lead capacitance, present at every position. [F]
    q : float
        Capacitor Q. [-]
    """

    plate_width_m: float
    plate_length_m: float
    gaps: int
    dielectric_thickness_m: float
    permittivity: float
    travel_m: float
    stray_f: float
    q: float
    source: str = "spec"
    kind: str = "plates"
    q_source: str = "given in the spec (tuner.q)"
    dielectric: str | None = None

    @property
    def has_position(self) -> bool:
        return True

    @property
    def max_overlap_m(self) -> float:
        """Largest overlap the travel gives (the travel, capped at the plate length). [m]"""
        return min(self.travel_m, self.plate_length_m)

    @property
    def capacitance_per_m(self) -> float:
        """Capacitance added per metre of slide while the plates overlap. [F/m]"""
        return float(parallel_plate_capacitance(self.plate_width_m, self.dielectric_thickness_m,
                                                self.permittivity, self.gaps))

    @property
    def min_f(self) -> float:
        """Capacitance at no overlap: the stray. [F]"""
        return self.stray_f

    @property
    def max_f(self) -> float:
        """Capacitance at full travel. [F]"""
        return float(self.capacitance_f(self.max_overlap_m))

    def capacitance_f(self, position_m):
        """Capacitance at slide position ``position_m`` (0 = no overlap). [F]"""
        x = np.clip(np.asarray(position_m, dtype=float), 0.0, self.max_overlap_m)
        return self.stray_f + self.capacitance_per_m * x

    def position_m(self, capacitance_f):
        """Slide position giving ``capacitance_f``; NaN outside [min_f, max_f]. [m]"""
        c = np.asarray(capacitance_f, dtype=float)
        x = (c - self.stray_f) / self.capacitance_per_m
        ok = (c >= self.min_f * (1 - 1e-12)) & (c <= self.max_f * (1 + 1e-12))
        return np.where(ok, np.clip(x, 0.0, self.max_overlap_m), np.nan)

    def thickness_for(self, capacitance_f: float) -> float:
        """Dielectric thickness that would put ``capacitance_f`` at full travel. [m]"""
        extra = capacitance_f - self.stray_f
        if extra <= 0:
            return float("inf")
        return float(self.gaps * EPSILON0_F_M * self.permittivity * self.plate_width_m
                     * self.max_overlap_m / extra)

    def describe(self, imperial: bool = False) -> str:
        """One line for the user; lengths in inches (and mm) when ``imperial``."""
        if imperial:
            def ln(x):
                return f"{x / 0.0254:.3g} in"
            sizes = (f"plates {ln(self.plate_width_m)} × {ln(self.plate_length_m)}, travel "
                     f"{ln(self.travel_m)} ({self.plate_width_m * 1e3:.0f} × {self.plate_length_m * 1e3:.0f} mm, "
                     f"{self.travel_m * 1e3:.0f} mm)")
            per = f"{self.capacitance_per_m * 0.0254 * 1e12:.3g} pF per inch"
        else:
            sizes = (f"plates {self.plate_width_m * 1e3:.0f} × {self.plate_length_m * 1e3:.0f} mm, "
                     f"travel {self.travel_m * 1e3:.0f} mm")
            per = f"{self.capacitance_per_m * 1e-3 * 1e12:.3g} pF per mm"
        return (f"sliding-plate capacitor, {self.gaps} gap(s) of {self.dielectric_thickness_m * 1e3:.3g} mm "
                f"at ε_r {self.permittivity:.3g}, {sizes}, stray {_c(self.stray_f)}: {_c(self.min_f)} to "
                f"{_c(self.max_f)} ({per}), Q {self.q:.4g}; Q {self.q_source}")


def _c(value_f: float) -> str:
    from simloop.units import format_quantity

    return format_quantity(value_f, "capacitance")


Tuner = RangeTuner | PlateTuner

#: The tuner assumed when a spec has no ``[tuner]``: a 12–365 pF single-gang air-variable, the
#: common broadcast-receiver part (common practice; Q 1000 is an assumption for an air
#: dielectric at MF, the same default the spec uses, not a measured value).
DEFAULT_TUNER: Final = RangeTuner(min_f=12e-12, max_f=365e-12, q=1000.0, source="default",
                                  q_source="assumed for an air-variable (common practice)")


def tuner_from_spec(tuner_spec) -> Tuner:
    """The tuner model of a spec's ``[tuner]`` (a :class:`simloop.spec.TunerSpec`), or
    :data:`DEFAULT_TUNER` for None."""
    if tuner_spec is None:
        return DEFAULT_TUNER
    if tuner_spec.kind == "range":
        return RangeTuner(min_f=float(tuner_spec.min_f), max_f=float(tuner_spec.max_f),
                          q=float(tuner_spec.q), q_source=getattr(tuner_spec, "q_source", "") or
                          "given in the spec (tuner.q)")
    if tuner_spec.kind == "plates":
        return PlateTuner(
            plate_width_m=float(tuner_spec.plate_width_m),
            plate_length_m=float(tuner_spec.plate_length_m),
            gaps=int(tuner_spec.gaps),
            dielectric_thickness_m=float(tuner_spec.dielectric_thickness_m),
            permittivity=float(tuner_spec.permittivity),
            travel_m=float(tuner_spec.travel_m),
            stray_f=float(tuner_spec.stray_f),
            q=float(tuner_spec.q),
            q_source=getattr(tuner_spec, "q_source", "") or "given in the spec (tuner.q)",
            dielectric=getattr(tuner_spec, "dielectric", None),
        )
    raise ValueError(f"unknown tuner kind {tuner_spec.kind!r}")
