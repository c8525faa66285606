r"""Quasi-static circuit solver: a partial element equivalent circuit (PEEC) of the MoM's mesh.

The same segments NEC solves become branches of a circuit (Ruehli 1974): each segment has its
partial self-inductance, partial mutual inductances to every other segment and a series
resistance; the charge sits on cells of half a segment either side of every node, coupled by
partial potential coefficients; each port segment carries a voltage source in series (a gap).
Nothing here depends on frequency but the skin-effect resistance, so the partial elements are
filled once per geometry (:func:`build_circuit`).

Formulation (why not the usual one)
    Kirchhoff's current law with the charges, :math:`A I + j\omega q = 0`, and the branch law
    :math:`(R + j\omega L_p) I - A^T P q = V` are solved for branch currents and node charges
    together. Eliminating the charges (the :math:`Z + P/j\omega` form) brings back the
    low-frequency breakdown of the MoM (condition numbers of 10⁶ at 1 MHz, 10¹² at 1 kHz).
    Instead the currents are split on a spanning tree of the wire graph,
    :math:`I = C\,i_{loop} + j\omega\,G\,q_r`: C holds one closed loop per link of the tree
    (the tap circuits), G routes the current that charges each node from the root along the tree,
    and q_r are the node charges with the root's replaced by total charge = 0. Projecting the
    branch law on [C G] gives the square system

    .. math:: \left[W^T (R + j\omega L_p) W\,D(\omega) + \begin{pmatrix}0&0\\0&P_r\end{pmatrix}\right]
              \begin{pmatrix}i_{loop}\\ q_r\end{pmatrix} = W^T V,\quad W = [C\ G],\
              D = \mathrm{diag}(1, j\omega)

    whose blocks stay finite and non-singular as ω → 0 (loop currents from R and L, charges from
    P): a loop-tree form of modified nodal analysis. The projected matrices
    :math:`W^T R W`, :math:`W^T L_p W` and :math:`P_r` are filled once.

Losses per segment: the exact round-wire skin-effect resistance (Bessel functions) times
(1 + the proximity factor of the segment's turn in a row of all the winding's turns, from Smith's
2-D multi-wire solution, per wire rather than averaged), and at each port the radiation
resistance of the current path's magnetic dipole moment, :math:`R_{ij} = \eta_0 k^4\,
\mathbf m_i\cdot\mathbf m_j/(6\pi)` (micro- to milliohms here). Not modelled: retardation (the
relative error grows as (kD)², D the largest dimension), radiation beyond the magnetic-moment
term, internal inductance of the wire, and the current distribution inside a wire when turns are
so close that a filament on the axis no longer represents it (the thin-wire / filament
approximation; see README).

References
----------
.. [1] A. E. Ruehli, "Equivalent circuit models for three-dimensional multiconductor systems",
   IEEE Trans. Microwave Theory Tech. 22(3), 216–221, 1974.
.. [2] F. W. Grover, *Inductance Calculations*, Van Nostrand, 1946, ch. 3 (parallel filaments).
.. [3] G. S. Smith, "Radiation efficiency of electrically small multiturn loop antennas",
   IEEE Trans. Antennas Propag. AP-20(5), 1972 (proximity effect).
.. [4] C. A. Balanis, *Antenna Theory*, 4th ed., Wiley, 2016, ch. 5 (small-loop radiation).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field

import numpy as np
from scipy import sparse, special
from scipy.linalg import lu_factor, lu_solve
from scipy.sparse.csgraph import breadth_first_order

from simloop import partial, reference
from simloop.mesh import C0, Mesh
from simloop.reference import MU0

ETA0 = MU0 * C0  #: impedance of free space [Ω]
#: Pieces per turn of a winding built by :func:`simloop.geometry.build_loop`.
PIECES_PER_TURN = 5


@dataclass(frozen=True, eq=False)
class Topology:
    """Segments as branches of a graph, with its spanning tree split.

    Attributes
    ----------
    starts, ends : ndarray, shape (b, 3)
        Segment end points, in the mesh's wire order. [m]
    node_from, node_to : ndarray of int, shape (b,)
    nodes_m : ndarray, shape (n, 3)
        Node positions. [m]
    port_branch : ndarray of int, shape (k,)
        Segment index of each port.
    w : ndarray, shape (b, b)
        [C G]: fundamental loops (one per link) then tree paths from the root to every other node.
    n_loops : int
    root : int
        Node whose charge is minus the sum of the others.
    """

    starts: np.ndarray
    ends: np.ndarray
    node_from: np.ndarray
    node_to: np.ndarray
    nodes_m: np.ndarray
    port_branch: np.ndarray
    w: np.ndarray = field(repr=False)
    n_loops: int
    root: int
    other_nodes: np.ndarray


def mesh_segments(mesh: Mesh) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Segment end points of a mesh and the wire each belongs to, in NEC order."""
    n = mesh.segments
    wire = np.repeat(np.arange(n.size), n)
    k = np.arange(n.sum()) - np.repeat(np.cumsum(n) - n, n)
    d = (mesh.ends - mesh.starts)[wire] / n[wire, None]
    starts = mesh.starts[wire] + k[:, None] * d
    return starts, starts + d, wire


def _nodes(starts, ends, tol):
    pts = np.concatenate([starts, ends])
    key = np.round(pts / tol).astype(np.int64)
    _, first, inv = np.unique(key, axis=0, return_index=True, return_inverse=True)
    inv = inv.ravel()
    b = starts.shape[0]
    return pts[first], inv[:b], inv[b:]


def _tree_paths(n_nodes, nf, nt, root):
    """G (b, n) of tree paths from the root and the mask of tree branches."""
    b = nf.size
    graph = sparse.coo_matrix((np.arange(1, b + 1), (nf, nt)), shape=(n_nodes, n_nodes)).tocsr()
    graph = graph + graph.T
    order, pred = breadth_first_order(graph, root, directed=False, return_predecessors=True)
    if order.size != n_nodes:
        raise ValueError("the wire mesh is not connected")
    g = np.zeros((b, n_nodes))
    tree = np.zeros(b, dtype=bool)
    for node in order[1:]:
        parent = pred[node]
        br = int(graph[parent, node]) - 1
        tree[br] = True
        g[:, node] = g[:, parent]
        g[br, node] = 1.0 if nf[br] == parent else -1.0
    return g, tree


def build_topology(mesh: Mesh) -> Topology:
    """Graph, spanning tree, loops and tree paths of a mesh's segments."""
    starts, ends, wire = mesh_segments(mesh)
    tol = 1e-6 * float(np.linalg.norm(ends - starts, axis=1).min())
    nodes, nf, nt = _nodes(starts, ends, tol)
    root = int(nf[0])
    g, tree = _tree_paths(nodes.shape[0], nf, nt, root)
    links = np.flatnonzero(~tree)
    c = g[:, nf[links]] - g[:, nt[links]]  # loop: link from → to, back along the tree to from
    c[links, np.arange(links.size)] += 1.0
    others = np.array([n for n in range(nodes.shape[0]) if n != root])
    first_seg = np.concatenate([[0], np.cumsum(mesh.segments)[:-1]])
    ports = np.array([first_seg[t - 1] for t in mesh.port_tags], dtype=int)
    return Topology(starts=starts, ends=ends, node_from=nf, node_to=nt, nodes_m=nodes,
                    port_branch=ports, w=np.concatenate([c, g[:, others]], axis=1),
                    n_loops=int(links.size), root=root, other_nodes=others)


def _half_cells(top: Topology):
    """Half segments as charge-cell pieces: end points and the node each belongs to."""
    mid = (top.starts + top.ends) / 2
    starts = np.concatenate([top.starts, mid])
    ends = np.concatenate([mid, top.ends])
    owner = np.concatenate([top.node_from, top.node_to])
    return starts, ends, owner


def node_potential_matrix(top: Topology, radius_m: float) -> np.ndarray:
    """Potential coefficients between node charge cells (half segments either side). [1/F]"""
    hs, he, owner = _half_cells(top)
    p_half = partial.potential_matrix(hs, he, radius_m)
    length = np.linalg.norm(he - hs, axis=1)
    cell = np.bincount(owner, weights=length, minlength=top.nodes_m.shape[0])
    s = sparse.csr_matrix((length / cell[owner], (owner, np.arange(owner.size))),
                          shape=(cell.size, owner.size))
    return np.asarray(s @ (s @ p_half).T)


def proximity_coupling(turns: int, spacing_ratio: float) -> np.ndarray:
    r"""Proximity-loss matrix of a row of N parallel wires with arbitrary currents, shape (N, N). [-]

    Smith's (1972) 2-D expansion with absolute coefficients: the surface current of wire n is
    :math:`K_n = \frac{1}{2\pi a}[I_n + \sum_m C_{nm}\cos m\varphi]`, and requiring A_z constant
    on every wire gives C = T I, linear in the wire currents (a wire with no net current, an open
    turn, still carries eddy currents). The loss per unit length is R'_skin·Iᵀ(1 + ½TᵀT)I; this
    returns ½TᵀT. With equal currents its sum over all elements is N·R_p/R_0 of
    :func:`simloop.reference.proximity_factor_smith1972`; for N = 2 it is the exact two-wire
    result.
    """
    n_w = int(turns)
    if n_w < 2:
        return np.zeros((max(n_w, 1), max(n_w, 1)))
    ca = float(spacing_ratio)
    h = int(np.clip(np.ceil(-40 / np.log(1 / (2 * ca))) + 8, 8, 400))
    kk = np.arange(1, h + 1)
    centres = (2 * np.arange(n_w) - (n_w - 1)) * ca
    lg = special.gammaln(kk[None, :] + kk[:, None]) - special.gammaln(kk[:, None] + 1) - special.gammaln(kk[None, :])
    mat = np.eye(n_w * h)
    rhs = np.zeros((n_w * h, n_w))
    for n in range(n_w):
        for p in range(n_w):
            if p == n:
                continue
            t = 1.0 / (centres[n] - centres[p])
            logmag = lg + np.log(kk[:, None] / kk[None, :]) + (kk[None, :] + kk[:, None]) * np.log(abs(t))
            sign = (-1.0) ** kk[:, None] * np.sign(t) ** (kk[None, :] + kk[:, None])
            mat[n * h:(n + 1) * h, p * h:(p + 1) * h] += sign * np.exp(logmag)
            rhs[n * h:(n + 1) * h, p] = 2 * (-1.0) ** (kk + 1) * t**kk
    tt = np.linalg.solve(mat, rhs)
    return 0.5 * tt.T @ tt


def _turn_of_segments(mesh: Mesh, wire: np.ndarray) -> np.ndarray:
    """Winding turn of every segment (-1 off the winding); five pieces per turn, in order."""
    turn = np.where(mesh.winding_wire[wire], mesh.piece[wire] // PIECES_PER_TURN, -1)
    return turn


def segment_resistance_matrix(mesh: Mesh, proximity: bool) -> np.ndarray:
    """Series-loss matrix of the segments in units of R'_skin(f): R = matrix × R'_skin. [m]

    Diagonal: the segment lengths (skin effect). With ``proximity``, the turn-to-turn matrix of
    :func:`proximity_coupling` is spread over winding segments: each pair of parallel segments in
    turns t, t' whose axial extents overlap by o metres and whose distance is within half a pitch
    of |t − t'| pitches gets ½(TᵀT)_tt'·o (the 2-D model applied locally along the sides).
    """
    starts, ends, wire = mesh_segments(mesh)
    lengths = np.linalg.norm(ends - starts, axis=1)
    out = np.diag(lengths)
    turn = _turn_of_segments(mesh, wire)
    if not proximity or turn.max() < 1:
        return out
    n_turns = int(turn.max()) + 1
    first = [np.flatnonzero(mesh.winding_wire & (mesh.piece == PIECES_PER_TURN * t))[0] for t in (0, 1)]
    pitch = float(np.linalg.norm(mesh.starts[first[1]] - mesh.starts[first[0]]))
    coupling = proximity_coupling(n_turns, pitch / (2 * mesh.radius_m))
    idx = np.flatnonzero(turn >= 0)
    i, j = np.meshgrid(idx, idx, indexing="ij")
    i, j = i.ravel(), j.ravel()
    u = (ends - starts) / lengths[:, None]
    par = np.abs(np.einsum("ij,ij->i", u[i], u[j])) > 1 - 1e-6
    i, j = i[par], j[par]
    s0 = np.einsum("ij,ij->i", starts[j] - starts[i], u[i])
    s1 = np.einsum("ij,ij->i", ends[j] - starts[i], u[i])
    overlap = np.clip(np.minimum(lengths[i], np.maximum(s0, s1)) - np.maximum(0.0, np.minimum(s0, s1)), 0, None)
    perp = np.linalg.norm(starts[j] - starts[i] - s0[:, None] * u[i], axis=1)
    dt = np.abs(turn[i] - turn[j])
    near = (overlap > 0) & (np.abs(perp - dt * pitch) < 0.5 * pitch)
    i, j, o = i[near], j[near], overlap[near]
    np.add.at(out, (i, j), coupling[turn[i], turn[j]] * o)
    return out


@dataclass(frozen=True, eq=False)
class CircuitModel:
    """Partial elements of one mesh, projected on loops and tree paths; filled once.

    Attributes
    ----------
    topology : Topology
    k_l : ndarray, shape (b, b)
        Wᵀ L_p W. [H]
    k_r : ndarray, shape (b, b)
        Wᵀ diag(loss weights) W; times R'_skin(f) it is Wᵀ R W. [m]
    p_r : ndarray, shape (n-1, n-1)
        Potential coefficients of the node charges with the root's eliminated by total charge = 0.
        [1/F]
    radius_m : float
    resistivity_ohm_m : float or None
        None: lossless wire (no skin or proximity loss; the radiation term stays).
    proximity : bool
    partial_inductance_h : ndarray, shape (b, b)
        L_p of the segments. [H]
    """

    topology: Topology
    k_l: np.ndarray = field(repr=False)
    k_r: np.ndarray = field(repr=False)
    p_r: np.ndarray = field(repr=False)
    radius_m: float
    resistivity_ohm_m: float | None
    proximity: bool
    partial_inductance_h: np.ndarray = field(repr=False)

    @property
    def ports(self) -> int:
        return int(self.topology.port_branch.size)

    @property
    def n_segments(self) -> int:
        return int(self.topology.starts.shape[0])

    def resistance_per_m(self, frequency_hz: float) -> float:
        """Skin-effect resistance per metre of the wire (0 if lossless). [Ω/m]"""
        if self.resistivity_ohm_m is None:
            return 0.0
        return float(reference.resistance_per_length_round_wire(self.radius_m, frequency_hz,
                                                                self.resistivity_ohm_m))

    def with_proximity(self, proximity: bool) -> "CircuitModel":
        """The same circuit with or without the proximity part of the series loss."""
        if bool(proximity) == self.proximity:
            return self
        top = self.topology
        if proximity:
            raise ValueError("proximity factors need the mesh: use build_circuit(..., proximity=True)")
        lengths = np.linalg.norm(top.ends - top.starts, axis=1)
        return dataclasses.replace(self, k_r=top.w.T @ (lengths[:, None] * top.w), proximity=False)

    def _d(self, w):
        top = self.topology
        d = np.ones(top.w.shape[1], dtype=complex)
        d[top.n_loops:] = 1j * w
        return d

    def system_matrix(self, frequency_hz: float) -> np.ndarray:
        """The loop-tree system matrix at one frequency, shape (b, b)."""
        w = 2 * np.pi * float(frequency_hz)
        m = (self.resistance_per_m(frequency_hz) * self.k_r + 1j * w * self.k_l) * self._d(w)[None, :]
        nl = self.topology.n_loops
        m[nl:, nl:] += self.p_r
        return m

    def solve(self, frequency_hz: float) -> "CircuitSolution":
        """Solve the circuit with a unit voltage source at each port in turn (exact, one LU)."""
        f = float(frequency_hz)
        if not f > 0:
            raise ValueError(f"frequency must be positive, got {f}")
        top = self.topology
        x = _exact_states(self, f)
        branch = top.w @ (self._d(2 * np.pi * f)[:, None] * x)  # (b, k) currents per unit volt
        charges = np.zeros((top.nodes_m.shape[0], x.shape[1]), dtype=complex)
        charges[top.other_nodes] = x[top.n_loops:]
        charges[top.root] = -x[top.n_loops:].sum(axis=0)
        return _solution(self, f, branch, charges)

    def reduced_model(self, f_min_hz: float, f_max_hz: float, **kwargs) -> "ReducedModel":
        """Reduced-order model for a band, with its error against held-back exact solves."""
        return reduced_model(self, f_min_hz, f_max_hz, **kwargs)

    def z_sweep(self, frequencies_hz) -> np.ndarray:
        """Port impedance matrices over a sweep from the reduced model, shape (n, k, k). [Ω]

        Its measured error is :attr:`ReducedModel.error` of ``reduced_model(min, max)``
        (1e-5 tolerance); use :meth:`reduced_model` directly to read it.
        """
        f = np.asarray(frequencies_hz, dtype=float)
        return self.reduced_model(float(f.min()), float(f.max())).z(f)

    def self_resonance_hz(self, port: int, f_max_hz: float, f_min_hz: float | None = None) -> float | None:
        """First frequency at which Im Z_ii turns from positive to negative (parallel resonance).

        Scanned on a reduced model of [f_min, f_max] (default f_min = f_max/100), then refined by
        root finding on exact solves. None if there is none below ``f_max_hz``. [Hz]
        """
        return self.self_resonances_hz(f_max_hz, f_min_hz, ports=[port])[0]

    def self_resonances_hz(self, f_max_hz: float, f_min_hz: float | None = None, ports=None) -> list:
        """:meth:`self_resonance_hz` of several ports (default all) from one reduced model."""
        ports = range(self.ports) if ports is None else ports
        return _first_resonances(self, list(ports), f_max_hz, f_min_hz or f_max_hz / 100)


def _moments(top: Topology, currents, charges):
    m = 0.5 * currents @ np.cross(top.starts, top.ends)
    p = charges @ top.nodes_m
    return m, p


def _solution(model: CircuitModel, f: float, branch, charges) -> "CircuitSolution":
    top = model.topology
    y = branch[top.port_branch, :]
    z_c = np.linalg.inv(y)
    per_amp = (branch @ z_c).T  # (k, b): 1 A into port i, the others open
    q_per_amp = (charges @ z_c).T
    m, _ = _moments(top, per_amp, q_per_amp)
    k0 = 2 * np.pi * f / C0
    m_re = m.real
    z_rad = ETA0 * k0**4 / (6 * np.pi) * (m_re @ m_re.T)
    return CircuitSolution(frequency_hz=f, z_ohm=z_c + z_rad, radiation_resistance_ohm=z_rad,
                           port_currents=per_amp, node_charges=q_per_amp,
                           segment_starts_m=top.starts, segment_ends_m=top.ends, nodes_m=top.nodes_m)


@dataclass(frozen=True, eq=False)
class CircuitSolution:
    """The circuit's answer at one frequency.

    Attributes
    ----------
    frequency_hz : float
    z_ohm : ndarray, shape (k, k), complex
        Port impedance matrix, unused ports open, radiation resistance included. [Ω]
    radiation_resistance_ohm : ndarray, shape (k, k)
        The magnetic-moment radiation part of ``z_ohm``. [Ω]
    port_currents : ndarray, shape (k, b), complex
        Segment currents (along each segment's start → end) for 1 A driven into port i, the other
        ports open. [A]
    node_charges : ndarray, shape (k, n), complex
        Node charges of the same solutions. [C]
    segment_starts_m, segment_ends_m : ndarray, shape (b, 3)
    nodes_m : ndarray, shape (n, 3)
    """

    frequency_hz: float
    z_ohm: np.ndarray
    radiation_resistance_ohm: np.ndarray
    port_currents: np.ndarray
    node_charges: np.ndarray
    segment_starts_m: np.ndarray = field(repr=False)
    segment_ends_m: np.ndarray = field(repr=False)
    nodes_m: np.ndarray = field(repr=False)

    def dipole_moments(self) -> tuple[np.ndarray, np.ndarray]:
        r"""Magnetic and electric dipole moments of each port's unit-current solution.

        Returns
        -------
        m : ndarray, shape (k, 3), complex
            :math:`\tfrac12\sum_b I_b\,\mathbf s_b\times\mathbf e_b` (exact for straight
            segments with uniform current). [A·m²]
        p : ndarray, shape (k, 3), complex
            :math:`\sum_n q_n\mathbf r_n` from the node charges. [C·m]
        """
        m = 0.5 * self.port_currents @ np.cross(self.segment_starts_m, self.segment_ends_m)
        p = self.node_charges @ self.nodes_m
        return m, p


def build_circuit(mesh: Mesh, *, resistivity_ohm_m: float | None, proximity: bool = True) -> CircuitModel:
    """Fill the partial elements of a mesh once and project them on loops and tree paths.

    Parameters
    ----------
    mesh : simloop.mesh.Mesh
        The MoM's mesh; each port wire (one segment) becomes a gap with a voltage source.
    resistivity_ohm_m : float or None
        Wire resistivity; None for a lossless wire. [Ω·m]
    proximity : bool
        Include the proximity effect of neighbouring turns in the series loss.

    References
    ----------
    .. [1] A. E. Ruehli, IEEE Trans. MTT 22(3), 1974.
    """
    top = build_topology(mesh)
    lp = partial.partial_inductance_matrix(top.starts, top.ends, mesh.radius_m)
    p_node = node_potential_matrix(top, mesh.radius_m)
    o, r = top.other_nodes, top.root
    p_r = p_node[np.ix_(o, o)] - p_node[o, r][:, None] - p_node[r, o][None, :] + p_node[r, r]
    r_seg = segment_resistance_matrix(mesh, proximity)
    w = top.w
    return CircuitModel(topology=top, k_l=w.T @ lp @ w, k_r=w.T @ r_seg @ w, p_r=p_r,
                        radius_m=float(mesh.radius_m), resistivity_ohm_m=resistivity_ohm_m,
                        proximity=bool(proximity), partial_inductance_h=lp)


# ------------------------------------------------------------------------------------------------
# Reduced-order model: Galerkin projection on exact solutions (multi-point moment matching)
# ------------------------------------------------------------------------------------------------

#: Relative error (Frobenius norm of Z) against held-back exact solves the reduced model must meet
#: before it stops adding sample frequencies.
ROM_TOLERANCE = 1e-5


@dataclass(frozen=True, eq=False)
class ReducedModel:
    """A projection of the circuit on the span of a few exact solutions.

    The projected matrices keep the exact frequency dependence (skin-effect resistance, jω and
    the charges' D(ω)); only the solution space is reduced, so the model is exact at its sample
    frequencies and, in between, as good as the span. Its error is measured against exact solves
    held back from the basis.

    Attributes
    ----------
    sample_hz : ndarray
        Frequencies whose exact solutions span the basis. [Hz]
    held_back_hz : ndarray
        Frequencies solved exactly but kept out of the basis, to measure the error. [Hz]
    error : float
        Largest ‖Z_rom − Z_exact‖/‖Z_exact‖ (Frobenius) over ``held_back_hz``. [-]
    """

    model: CircuitModel = field(repr=False)
    basis_dim: int
    sample_hz: np.ndarray
    held_back_hz: np.ndarray
    error: float
    _mats: tuple = field(repr=False)

    def z(self, frequencies_hz) -> np.ndarray:
        """Port impedance matrices from the reduced model, shape (n, k, k). [Ω]"""
        f = np.atleast_1d(np.asarray(frequencies_hz, dtype=float))
        r1, r2, l1, l2, p, rhs, b1, b2, mom = self._mats
        out = np.empty((f.size,) + (rhs.shape[1],) * 2, dtype=complex)
        for n, fn in enumerate(f):
            w = 2 * np.pi * fn
            g = self.model.resistance_per_m(fn)
            m = g * (r1 + 1j * w * r2) + 1j * w * (l1 + 1j * w * l2) + p
            x = np.linalg.solve(m, rhs)
            z_c = np.linalg.inv((b1 + 1j * w * b2) @ x)
            mm = (mom[0] + 1j * w * mom[1]) @ x @ z_c  # (3, k) magnetic moments per amp
            k0 = w / C0
            out[n] = z_c + ETA0 * k0**4 / (6 * np.pi) * (mm.real.T @ mm.real)
        return out


def _reduce(model: CircuitModel, xs: list[np.ndarray]):
    top = model.topology
    v, s, _ = np.linalg.svd(np.concatenate(xs, axis=1), full_matrices=False)
    v = v[:, s > 1e-13 * s[0]]
    nl = top.n_loops
    e1 = v.copy()
    e1[nl:] = 0.0
    e2 = v - e1
    vh = v.conj().T
    p_b = np.zeros((v.shape[0], v.shape[0]))
    p_b[nl:, nl:] = model.p_r
    rhs = vh @ top.w[top.port_branch, :].T
    wp = top.w[top.port_branch, :]
    arm = 0.5 * np.cross(top.starts, top.ends).T @ top.w  # (3, b): moment per unit of each unknown
    mats = (vh @ model.k_r @ e1, vh @ model.k_r @ e2, vh @ model.k_l @ e1, vh @ model.k_l @ e2,
            vh @ p_b @ v, rhs, wp @ e1, wp @ e2, (arm @ e1, arm @ e2))
    return v.shape[1], mats


def _exact_states(model: CircuitModel, f: float):
    """Scaled-solve of the full system: unknowns x (b, k) and the exact Z. [-], [Ω]"""
    top = model.topology
    m = model.system_matrix(f)
    rhs = top.w[top.port_branch, :].T.astype(complex)
    row = 1.0 / np.abs(m).max(axis=1)
    m *= row[:, None]
    col = 1.0 / np.abs(m).max(axis=0)
    m *= col[None, :]
    return col[:, None] * lu_solve(lu_factor(m, check_finite=False), row[:, None] * rhs)


def reduced_model(model: CircuitModel, f_min_hz: float, f_max_hz: float, *, samples: int = 4,
                  max_samples: int = 12, tolerance: float = ROM_TOLERANCE) -> ReducedModel:
    """Build a reduced model for [f_min, f_max] from a few exact solves and measure its error.

    Samples are log-spaced across the band; the geometric midpoints between them are solved too
    but held back from the basis. While the held-back error exceeds ``tolerance`` the held-back
    solves join the basis and new midpoints are held back (up to ``max_samples`` in the basis).
    """
    lo, hi = float(f_min_hz), float(f_max_hz)
    sample = list(np.geomspace(lo, hi, samples)) if hi > lo else [lo]
    states = {f: _exact_states(model, f) for f in sample}
    while True:
        fs = sorted(states)
        held = [float(np.sqrt(a * b)) for a, b in zip(fs[:-1], fs[1:])] or [lo]
        exact_z = {f: model.solve(f).z_ohm for f in held}
        dim, mats = _reduce(model, [states[f] for f in fs])
        rom = ReducedModel(model, dim, np.array(fs), np.array(held), 0.0, mats)
        z_rom = rom.z(held)
        err = max(float(np.linalg.norm(z_rom[n] - exact_z[f]) / np.linalg.norm(exact_z[f]))
                  for n, f in enumerate(held))
        if err <= tolerance or len(fs) + len(held) > max_samples:
            return ReducedModel(model, dim, np.array(fs), np.array(held), err, mats)
        for f in held:
            states[f] = _exact_states(model, f)


def _first_resonances(model: CircuitModel, ports, f_max: float, f_min: float) -> list:
    from scipy.optimize import brentq

    grid = np.geomspace(f_min, f_max, 600)
    z = model.reduced_model(f_min, f_max, samples=6).z(grid)
    out = []
    for port in ports:
        x = z[:, port, port].imag
        change = np.flatnonzero((x[:-1] > 0) & (x[1:] <= 0))
        if change.size == 0:
            out.append(None)
            continue
        a, b = grid[change[0]], grid[change[0] + 1]

        def x_exact(f, port=port):
            return model.solve(f).z_ohm[port, port].imag

        if not (x_exact(a) > 0 >= x_exact(b)):  # the reduced model was off near a pole: widen
            a, b = a / 1.05, b * 1.05
        out.append(float(brentq(x_exact, a, b, xtol=1e-7 * a)))
    return out
