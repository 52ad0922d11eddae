"""Batched modified nodal analysis: DC operating points of many variants of one netlist at once.

The method is modified nodal analysis (Ho, Ruehli & Brennan, IEEE Trans. Circuits and
Systems, 1975). A *batch* is B variants of the same netlist (fault hypotheses × tolerance
samples): every element holds one value per variant, and an element can be absent in some
variants (an open is a removed element, not a large resistance). All B systems are built as one
stacked array and solved by one call into LAPACK.

The primitives are deliberately few; every component type reduces to them (see
``components.py``):

- :class:`Branch` ``a → b``: an EMF ``e`` in series with a resistance ``r >= 0``, so that
  ``V_a - V_b = e + r·I`` with ``I`` the current from ``a`` to ``b`` through it. A resistor is a
  branch with ``e = 0``; a battery is its EMF behind its internal resistance.
- :class:`Vccs`: a current ``gm·(V_cp - V_cn)`` injected into node ``out_p`` and drawn from
  ``out_n`` (the ratiometric sensor's output).

Unknowns are the voltages of the non-ground nodes, then the currents of the branches that can be
zero-ohm. A branch whose resistance is positive in every variant is stamped in Norton form
(conductance ``g = 1/r`` and current ``g·e``); a branch that is zero-ohm in at least one variant
gets its own current unknown and equation row, which is what makes the analysis "modified".
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components

from assistant.errors import CircuitError

GROUND = 0  # node index of the reference


@dataclass(frozen=True, eq=False)
class Branch:
    """An EMF in series with a resistance between nodes ``a`` and ``b``, per variant."""

    owner: str  # the component (or fault) it belongs to, named in errors
    a: int
    b: int
    ohms: np.ndarray  # (B,) >= 0
    emf: np.ndarray  # (B,) volts: V_a - V_b when no current flows
    active: np.ndarray  # (B,) bool; False: removed in that variant


@dataclass(frozen=True, eq=False)
class Vccs:
    """A voltage-controlled current source: ``gm·(V_cp - V_cn)`` into ``out_p``, out of ``out_n``."""

    owner: str
    out_p: int
    out_n: int
    ctrl_p: int
    ctrl_n: int
    siemens: np.ndarray  # (B,)
    active: np.ndarray  # (B,) bool


@dataclass(frozen=True, eq=False)
class Netlist:
    """Nodes (index 0 is the ground) and the primitives joining them, for a batch of B variants."""

    nodes: tuple[str, ...]
    branches: tuple[Branch, ...]
    vccs: tuple[Vccs, ...]
    batch: int

    def index(self, node: str) -> int:
        """Index of a node by name (CircuitError if absent)."""
        try:
            return self.nodes.index(node)
        except ValueError as exc:
            raise CircuitError(f"node '{node}' is not in the circuit") from exc


@dataclass(frozen=True, eq=False)
class Solution:
    """The operating points of a batch.

    ``volts[v, i]`` is node ``i``'s voltage in variant ``v`` (ground 0). A node cut off from the
    ground by a fault lies in a floating *island* (``island[v, i] > 0``); its voltage is then
    relative to the island's own lowest-numbered node, so differences inside one island are
    physical and differences across islands are not (a meter across two islands closes no loop
    and reads 0 V). ``currents[v, j]`` is the current from ``a`` to ``b`` in branch ``j``.
    ``response[v, i, k]`` is node ``i``'s voltage when 1 A is driven into probe pair ``k``'s first
    node and out of its second with every EMF at zero: ``response[a] - response[b]`` is the
    resistance the pair sees (the Thevenin resistance a voltmeter loads, or an ohmmeter reads).
    """

    volts: np.ndarray  # (B, n)
    island: np.ndarray  # (B, n) int
    currents: np.ndarray  # (B, nbranches)
    response: np.ndarray  # (B, n, K)


def solve(net: Netlist, probes: Sequence[tuple[int, int]] = ()) -> Solution:
    """Solve every variant of the netlist; ``probes`` are node pairs to drive with 1 A each.

    The stacked system, for variant ``v``, is ``A[v] @ x[v] = z[v]`` with the layout::

                      node voltages V_1..V_{n-1}   zero-ohm-capable branch currents I_1..I_m
        rows 0..n-2   [ G (conductances, VCCS) |   +1 / -1 where branch j leaves / enters ]  = Norton currents
        rows n-1..    [ +1 at a, -1 at b       |   -r_j on the diagonal                   ]  = e_j

    Row ``i`` (``i < n-1``) is Kirchhoff's current law at node ``i+1``: currents leaving it sum
    to zero. Row ``n-1+j`` is branch ``j``'s law ``V_a - V_b - r·I = e``; where the branch is
    removed the row is replaced by ``I = 0``. In each floating island the law of its first node
    is replaced by ``V = 0`` (the island's KCL rows are dependent, so this loses nothing).
    ``z`` has column 0 for the sources and one column per probe pair (its sources zeroed).
    """
    B = net.batch
    n = len(net.nodes)
    probes = tuple(probes)
    K = len(probes)
    branches = net.branches
    zero_capable = [j for j, br in enumerate(branches) if bool(np.any(br.active & (br.ohms <= 0)))]
    row_of = {j: n - 1 + r for r, j in enumerate(zero_capable)}
    N = n - 1 + len(zero_capable)
    _check_zero_ohm_loops(net)
    island = _islands(net)

    A = np.zeros((B, N, N))
    z = np.zeros((B, N, 1 + K))

    def idx(node: int) -> int | None:
        return None if node == GROUND else node - 1

    for j, br in enumerate(branches):
        ia, ib = idx(br.a), idx(br.b)
        if j in row_of:
            r = row_of[j]
            on = br.active.astype(float)
            if ia is not None:
                A[:, ia, r] += on
                A[:, r, ia] += on
            if ib is not None:
                A[:, ib, r] -= on
                A[:, r, ib] -= on
            A[:, r, r] = np.where(br.active, -br.ohms, 1.0)
            z[:, r, 0] = np.where(br.active, br.emf, 0.0)
            continue
        g = np.divide(1.0, br.ohms, out=np.zeros(B), where=br.active & (br.ohms > 0))
        j_src = g * br.emf
        if ia is not None:
            A[:, ia, ia] += g
            z[:, ia, 0] += j_src
        if ib is not None:
            A[:, ib, ib] += g
            z[:, ib, 0] -= j_src
        if ia is not None and ib is not None:
            A[:, ia, ib] -= g
            A[:, ib, ia] -= g
    for src in net.vccs:
        gm = np.where(src.active, src.siemens, 0.0)
        for out_node, sign in ((src.out_p, -1.0), (src.out_n, 1.0)):
            io = idx(out_node)
            if io is None:
                continue
            for ctrl, csign in ((src.ctrl_p, 1.0), (src.ctrl_n, -1.0)):
                ic = idx(ctrl)
                if ic is not None:
                    A[:, io, ic] += sign * csign * gm
    for k, (pa, pb) in enumerate(probes):
        ia, ib = idx(pa), idx(pb)
        if ia is not None:
            z[:, ia, 1 + k] += 1.0
        if ib is not None:
            z[:, ib, 1 + k] -= 1.0

    # pin the first node of every floating island
    for v, i in zip(*_island_heads(island), strict=True):
        A[v, i - 1, :] = 0.0
        A[v, i - 1, i - 1] = 1.0
        z[v, i - 1, :] = 0.0

    try:
        x = np.linalg.solve(A, z)
    except np.linalg.LinAlgError as exc:
        bad = _singular_variant(A)
        names = _owners_near(net, A, bad)
        raise CircuitError("the circuit cannot be solved (its equations are singular) around: "
                           + ", ".join(names), components=names) from exc
    finite = np.isfinite(x).all(axis=(1, 2))
    if not finite.all():
        bad = int(np.argmin(finite))
        names = _owners_near(net, A, bad)
        raise CircuitError("the circuit has no finite solution around: " + ", ".join(names), components=names)

    volts = np.zeros((B, n))
    volts[:, 1:] = x[:, : n - 1, 0]
    response = np.zeros((B, n, K))
    response[:, 1:, :] = x[:, : n - 1, 1:]
    currents = np.zeros((B, len(branches)))
    for j, br in enumerate(branches):
        if j in row_of:
            currents[:, j] = np.where(br.active, x[:, row_of[j], 0], 0.0)
        else:
            g = np.divide(1.0, br.ohms, out=np.zeros(B), where=br.active & (br.ohms > 0))
            currents[:, j] = g * (volts[:, br.a] - volts[:, br.b] - br.emf)
    return Solution(volts, island, currents, response)


def _edges(net: Netlist) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(a, b, active (B, E)) of every element that joins two nodes."""
    a = [br.a for br in net.branches] + [s.out_p for s in net.vccs]
    b = [br.b for br in net.branches] + [s.out_n for s in net.vccs]
    act = [br.active for br in net.branches] + [s.active for s in net.vccs]
    active = np.stack(act, axis=1) if act else np.zeros((net.batch, 0), dtype=bool)
    return np.asarray(a, dtype=int), np.asarray(b, dtype=int), active


def _islands(net: Netlist) -> np.ndarray:
    """(B, n) connected-component label of every node; 0 is the ground's island."""
    n = len(net.nodes)
    a, b, active = _edges(net)
    patterns, inverse = np.unique(active, axis=0, return_inverse=True)
    labels = np.zeros((len(patterns), n), dtype=int)
    for p, pattern in enumerate(patterns):
        on = pattern.astype(bool)
        graph = coo_matrix((np.ones(int(on.sum())), (a[on], b[on])), shape=(n, n))
        _, lab = connected_components(graph, directed=False)
        ground = lab[GROUND]
        # relabel: ground's island 0, the others 1.. in order of their first node
        order: dict[int, int] = {ground: 0}
        for node_label in lab:
            order.setdefault(int(node_label), len(order))
        labels[p] = [order[int(x)] for x in lab]
    return labels[np.asarray(inverse).reshape(-1)]


def _island_heads(island: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(variant, node) of the first node of every floating island."""
    B, n = island.shape
    floating = island > 0
    if not floating.any():
        return np.zeros(0, dtype=int), np.zeros(0, dtype=int)
    # a node is the head of its island when no lower node carries the same label
    first = np.zeros_like(floating)
    for i in range(1, n):
        same_before = (island[:, :i] == island[:, i : i + 1]).any(axis=1)
        first[:, i] = floating[:, i] & ~same_before
    return np.nonzero(first)


def _check_zero_ohm_loops(net: Netlist) -> None:
    """Refuse a loop made only of zero-ohm branches: the currents around it are undefined."""
    zero = [j for j, br in enumerate(net.branches) if bool(np.any(br.active & (br.ohms <= 0)))]
    if len(zero) < 2:
        return
    mask = np.stack([net.branches[j].active & (net.branches[j].ohms <= 0) for j in zero], axis=1)
    for pattern in np.unique(mask, axis=0):
        parent: dict[int, int] = {}

        def find(x: int) -> int:
            while parent.setdefault(x, x) != x:
                parent[x] = parent[parent[x]]
                x = parent[x]
            return x

        used: list[int] = []
        for on, j in zip(pattern, zero, strict=True):
            if not on:
                continue
            br = net.branches[j]
            ra, rb = find(br.a), find(br.b)
            used.append(j)
            if ra == rb:
                loop = _loop_owners(net, used, br.a)
                raise CircuitError(
                    "a loop of zero-resistance parts (" + ", ".join(loop) + ") leaves its currents "
                    "undefined; give one of them its resistance",
                    components=loop,
                )
            parent[ra] = rb


def _loop_owners(net: Netlist, used: list[int], node: int) -> list[str]:
    """Owners of the zero-ohm branches joined to ``node`` through zero-ohm branches."""
    reach = {node}
    changed = True
    while changed:
        changed = False
        for j in used:
            br = net.branches[j]
            if (br.a in reach) != (br.b in reach):
                reach |= {br.a, br.b}
                changed = True
    return sorted({net.branches[j].owner for j in used if net.branches[j].a in reach})


def _singular_variant(A: np.ndarray) -> int:
    for v in range(A.shape[0]):
        if np.linalg.matrix_rank(A[v]) < A.shape[1]:
            return v
    return 0


def _owners_near(net: Netlist, A: np.ndarray, variant: int) -> list[str]:
    """The components touching the nodes of the singular direction of one variant's matrix."""
    n = len(net.nodes)
    with np.errstate(all="ignore"):
        matrix = np.nan_to_num(A[variant], nan=0.0, posinf=1e300, neginf=-1e300)
        _, _, vt = np.linalg.svd(matrix)
    null = np.abs(vt[-1])
    involved = {i + 1 for i in range(n - 1) if null[i] > 1e-6 * null.max()}
    names = {br.owner for br in net.branches if br.active[variant] and ({br.a, br.b} & involved)}
    names |= {s.owner for s in net.vccs if s.active[variant] and ({s.out_p, s.out_n} & involved)}
    if not names:  # the singular direction lies in branch currents only
        names = {br.owner for br in net.branches if br.active[variant] and br.ohms[variant] <= 0}
    return sorted(names)
