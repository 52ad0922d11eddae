"""Batched modified nodal analysis: DC operating points of many variants of one netlist at once.

The method is modified nodal analysis (Ho, Ruehli & Brennan, IEEE Trans. Circuits and
Systems, 1975). A *batch* is B variants of the same netlist (fault hypotheses × tolerance
samples): every element holds one value per variant, and an element can be absent in some
variants (an open is a removed element, not a large resistance). All B systems share one
sparsity pattern; small ones are solved as one stacked array by LAPACK, larger ones by one
sparse elimination plan carried out for all variants at once (``elimination.py``), with a
pivoting LU for any variant it hands back.

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
from typing import Any

import numpy as np

from assistant.circuit.elimination import Elimination
from assistant.disjoint import DisjointSets
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
    ground by a fault lies in a floating *island* (``island[v, i] > 0``: the island is named by
    its lowest-numbered node); its voltage is then relative to that node, so differences inside one island are
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


def subset(net: Netlist, keep: np.ndarray) -> Netlist:
    """The same netlist for only the variants where ``keep`` is true."""
    branches = tuple(Branch(br.owner, br.a, br.b, br.ohms[keep], br.emf[keep], br.active[keep])
                     for br in net.branches)
    sources = tuple(Vccs(s.owner, s.out_p, s.out_n, s.ctrl_p, s.ctrl_n, s.siemens[keep], s.active[keep])
                    for s in net.vccs)
    return Netlist(net.nodes, branches, sources, int(np.count_nonzero(keep)))


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
    N = n - 1 + len(zero_capable)
    _check_zero_ohm_loops(net)
    island = _islands(net)
    pattern = _Pattern(net, zero_capable)
    data = pattern.values(net)  # (B, nnz): the matrix entries of every variant

    ohms = np.stack([br.ohms for br in branches], axis=1) if branches else np.zeros((B, 0))
    emf = np.stack([br.emf for br in branches], axis=1) if branches else np.zeros((B, 0))
    active = np.stack([br.active for br in branches], axis=1) if branches else np.zeros((B, 0), dtype=bool)
    norton = np.ones(len(branches), dtype=bool)
    norton[zero_capable] = False
    g = np.divide(1.0, ohms, out=np.zeros(ohms.shape), where=active & (ohms > 0) & norton[None, :])
    z = np.zeros((B, N, 1 + K))
    z[:, : n - 1, 0] = (g * emf) @ pattern.incidence.T
    if zero_capable:
        z[:, n - 1 :, 0] = np.where(active[:, zero_capable], emf[:, zero_capable], 0.0)
    for k, (pa, pb) in enumerate(probes):
        if pa != GROUND:
            z[:, pa - 1, 1 + k] += 1.0
        if pb != GROUND:
            z[:, pb - 1, 1 + k] -= 1.0

    # pin the first node of every floating island: its law becomes V = 0
    hv, hi = _island_heads(island)
    if hv.size:
        pinned = np.zeros((B, N), dtype=bool)
        pinned[hv, hi - 1] = True
        data[pinned[:, pattern.rows]] = 0.0
        data[hv, pattern.diagonal[hi - 1]] = 1.0
        z[hv, hi - 1, :] = 0.0

    x = np.empty_like(z)
    plan = _plan(pattern, n - 1) if N > DENSE_UP_TO else None
    width = plan.filled if plan is not None else N * N
    step = max(1, int(CHUNK_ENTRIES // (width + N * (1 + K))))
    for lo in range(0, B, step):
        hi_ = min(B, lo + step)
        redo = np.ones(hi_ - lo, dtype=bool)
        if plan is not None:
            x[lo:hi_], redo = plan.solve(data[lo:hi_], z[lo:hi_])
        if redo.any():  # small circuits, or a doubtful pivot: a pivoting LU for those variants
            which = np.nonzero(redo)[0] + lo
            solver = pattern.solve_sparse if N > SPARSE_ABOVE else pattern.solve_dense
            try:
                x[which] = solver(data[which], z[which])
            except (np.linalg.LinAlgError, RuntimeError) as exc:
                bad = int(which[pattern.singular_variant(data[which])])
                names = _owners_near(net, pattern.dense(data[bad]), bad)
                raise CircuitError("the circuit cannot be solved (its equations are singular) around: "
                                   + ", ".join(names), components=names) from exc
    finite = np.isfinite(x).all(axis=(1, 2))
    if not finite.all():
        bad = int(np.argmin(finite))
        names = _owners_near(net, pattern.dense(data[bad]), bad)
        raise CircuitError("the circuit has no finite solution around: " + ", ".join(names), components=names)

    volts = np.zeros((B, n))
    volts[:, 1:] = x[:, : n - 1, 0]
    response = np.zeros((B, n, K))
    response[:, 1:, :] = x[:, : n - 1, 1:]
    a_idx = np.array([br.a for br in branches], dtype=int)
    b_idx = np.array([br.b for br in branches], dtype=int)
    currents = g * (volts[:, a_idx] - volts[:, b_idx] - emf) if branches else np.zeros((B, 0))
    if zero_capable:
        currents[:, zero_capable] = np.where(active[:, zero_capable], x[:, n - 1 :, 0], 0.0)
    return Solution(volts, island, currents, response)


DENSE_UP_TO = 40  # unknowns up to which the stacked dense LAPACK solve is the faster
SPARSE_ABOVE = 150  # fallback: unknowns above which a variant is factorised sparse, one by one
_PLANS: dict[bytes, Elimination] = {}


def _plan(pattern: _Pattern, last: int) -> Elimination:
    """The elimination plan of a pattern (node rows before ``last``), planned once and kept."""
    key = np.concatenate([[pattern.size, last], pattern.rows, pattern.cols]).astype(np.int64).tobytes()
    plan = _PLANS.get(key)
    if plan is None:
        if len(_PLANS) > 64:
            _PLANS.clear()
        plan = _PLANS[key] = Elimination(pattern.size, pattern.rows, pattern.cols, last)
    return plan
CHUNK_ENTRIES = 2e6  # matrix entries held at once (16 MB of float64)
DENSE_MAP_ENTRIES = 2e6  # stamp maps up to this size are plain arrays


class _Pattern:
    """Where every element puts its values in the matrix, shared by all variants.

    The matrix entries of variant ``v`` are ``params[v] @ M``: ``params`` holds, per variant,
    each Norton branch's conductance, each zero-ohm-capable branch's presence and diagonal, and
    each controlled source's transconductance; ``M`` (sparse, parameters × entries) is the
    signed stamp of each. The diagonal is always in the pattern, so a pinned row stays in it.
    """

    def __init__(self, net: Netlist, zero_capable: list[int]) -> None:
        n = len(net.nodes)
        self.n = n
        self.size = n - 1 + len(zero_capable)
        self.zero_capable = zero_capable
        branches = net.branches
        inc = np.zeros((n, len(branches)))
        cols = np.arange(len(branches))
        np.add.at(inc, (np.array([br.a for br in branches], dtype=int), cols), 1.0)
        np.add.at(inc, (np.array([br.b for br in branches], dtype=int), cols), -1.0)
        self.incidence = inc[1:]  # (n-1, E): +1 where a branch leaves a node, -1 where it enters
        entries: dict[tuple[int, int], int] = {(i, i): i for i in range(self.size)}
        params: list[int] = []
        where: list[int] = []
        weights: list[float] = []
        q = 0

        def put(row: int, col: int, weight: float) -> None:
            where.append(entries.setdefault((row, col), len(entries)))
            params.append(q)
            weights.append(weight)

        row_of = {j: n - 1 + r for r, j in enumerate(zero_capable)}
        for j, br in enumerate(branches):
            ends = [(i - 1, s) for i, s in ((br.a, 1.0), (br.b, -1.0)) if i != GROUND]
            if j in row_of:
                r = row_of[j]
                for i, sign in ends:  # presence: the KCL column and the branch-law row
                    put(i, r, sign)
                    put(r, i, sign)
                q += 1
                put(r, r, 1.0)  # the diagonal: -r when present, 1 when removed
            else:
                for i, si in ends:
                    for k, sk in ends:
                        put(i, k, si * sk)
            q += 1
        for src in net.vccs:
            for out_node, sign in ((src.out_p, -1.0), (src.out_n, 1.0)):
                for ctrl, csign in ((src.ctrl_p, 1.0), (src.ctrl_n, -1.0)):
                    if out_node != GROUND and ctrl != GROUND:
                        put(out_node - 1, ctrl - 1, sign * csign)
            q += 1
        self.params = q
        keys = sorted(entries, key=entries.__getitem__)
        self.rows = np.array([k[0] for k in keys], dtype=int)
        self.cols = np.array([k[1] for k in keys], dtype=int)
        self.diagonal = np.arange(self.size)
        if q * len(keys) <= DENSE_MAP_ENTRIES:
            self.map: Any = np.zeros((q, len(keys)))
            np.add.at(self.map, (params, where), weights)
        else:  # scipy is imported only for large circuits: it costs a second to load
            from scipy.sparse import csr_matrix

            self.map = csr_matrix((weights, (params, where)), shape=(q, len(keys)))
        # the entries in compressed-column order, for the sparse factorisation
        order = np.lexsort((self.rows, self.cols))
        self.csc_order = order
        self.csc_indices = self.rows[order].astype(np.int32)
        self.csc_indptr = np.searchsorted(self.cols[order], np.arange(self.size + 1)).astype(np.int32)

    def values(self, net: Netlist) -> np.ndarray:
        """(B, nnz) matrix entries of every variant."""
        B = net.batch
        row_of = set(self.zero_capable)
        columns: list[np.ndarray] = []
        for j, br in enumerate(net.branches):
            if j in row_of:
                columns.append(br.active.astype(float))
                columns.append(np.where(br.active, -br.ohms, 1.0))
            else:
                columns.append(np.divide(1.0, br.ohms, out=np.zeros(B), where=br.active & (br.ohms > 0)))
        for src in net.vccs:
            columns.append(np.where(src.active, src.siemens, 0.0))
        params = np.stack(columns, axis=1) if columns else np.zeros((B, 0))
        if isinstance(self.map, np.ndarray):
            return params @ self.map
        return np.asarray(self.map.T @ params.T).T.copy()

    def dense(self, data: np.ndarray) -> np.ndarray:
        """The matrix (or matrices) of entries ``data``, dense."""
        lead = data.shape[:-1]
        flat = np.zeros((int(np.prod(lead, dtype=int)), self.size * self.size))
        flat[:, self.rows * self.size + self.cols] = data.reshape(-1, data.shape[-1])
        return flat.reshape(lead + (self.size, self.size))

    def solve_dense(self, data: np.ndarray, z: np.ndarray) -> np.ndarray:
        return np.linalg.solve(self.dense(data), z)

    def solve_sparse(self, data: np.ndarray, z: np.ndarray) -> np.ndarray:
        from scipy.sparse import csc_matrix
        from scipy.sparse.linalg import splu

        out = np.empty_like(z)
        ordered = np.ascontiguousarray(data[:, self.csc_order], dtype=np.float64)
        for v in range(data.shape[0]):
            matrix = csc_matrix((ordered[v].copy(), self.csc_indices, self.csc_indptr),
                                shape=(self.size, self.size))
            out[v] = splu(matrix).solve(z[v])
        return out

    def singular_variant(self, data: np.ndarray) -> int:
        for v in range(data.shape[0]):
            if np.linalg.matrix_rank(self.dense(data[v])) < self.size:
                return v
        return 0


def _edges(net: Netlist) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(a, b, active (B, E)) of every element that joins two nodes."""
    a = [br.a for br in net.branches] + [s.out_p for s in net.vccs]
    b = [br.b for br in net.branches] + [s.out_n for s in net.vccs]
    act = [br.active for br in net.branches] + [s.active for s in net.vccs]
    active = np.stack(act, axis=1) if act else np.zeros((net.batch, 0), dtype=bool)
    return np.asarray(a, dtype=int), np.asarray(b, dtype=int), active


def _islands(net: Netlist) -> np.ndarray:
    """(B, n) island of every node: the lowest node index it is connected to (0: the ground's).

    Labels spread along the present elements of every variant at once (each node takes the
    lowest label among its neighbours), with pointer jumping (a label takes its own label's
    label) so that long chains settle in a few rounds.
    """
    n = len(net.nodes)
    a, b, every = _edges(net)
    if a.size == 0:
        return np.tile(np.arange(n), (net.batch, 1))
    # variants share few patterns of present elements: trace each pattern once
    packed = np.packbits(every, axis=1)
    pattern_of: dict[bytes, int] = {}
    inverse = np.empty(net.batch, dtype=int)
    firsts: list[int] = []
    for v in range(net.batch):
        inverse[v] = pattern_of.setdefault(packed[v].tobytes(), len(firsts))
        if inverse[v] == len(firsts):
            firsts.append(v)
    return _trace(n, a, b, every[firsts])[inverse]


def _trace(n: int, a: np.ndarray, b: np.ndarray, active: np.ndarray) -> np.ndarray:
    """(P, n) lowest connected node index of every node, for P patterns of present edges."""
    B = active.shape[0]
    labels = np.tile(np.arange(n), (B, 1))
    rows = np.arange(B)[:, None]
    for _ in range(4 * n + 4):
        low = np.where(active, np.minimum(labels[:, a], labels[:, b]), n)
        new = labels.copy()
        np.minimum.at(new, (np.broadcast_to(rows, low.shape), np.broadcast_to(a, low.shape)), low)
        np.minimum.at(new, (np.broadcast_to(rows, low.shape), np.broadcast_to(b, low.shape)), low)
        for _ in range(8):  # pointer jumping
            jumped = new[rows, new]
            if np.array_equal(jumped, new):
                break
            new = jumped
        if np.array_equal(new, labels):
            return labels
        labels = new
    raise CircuitError("the circuit's connections could not be traced")  # unreachable: n rounds suffice


def _island_heads(island: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(variant, node) of the first node of every floating island."""
    nodes = np.arange(island.shape[1])
    variant, node = np.nonzero((island == nodes[None, :]) & (nodes[None, :] > 0))
    return variant, node


def _check_zero_ohm_loops(net: Netlist) -> None:
    """Refuse a loop made only of zero-ohm branches: the currents around it are undefined."""
    zero = [j for j, br in enumerate(net.branches) if bool(np.any(br.active & (br.ohms <= 0)))]
    if len(zero) < 2:
        return
    mask = np.stack([net.branches[j].active & (net.branches[j].ohms <= 0) for j in zero], axis=1)
    for pattern in np.unique(mask, axis=0):
        sets: DisjointSets[int] = DisjointSets()
        used: list[int] = []
        for on, j in zip(pattern, zero, strict=True):
            if not on:
                continue
            br = net.branches[j]
            used.append(j)
            if not sets.union(br.a, br.b):
                loop = _loop_owners(net, used, br.a)
                raise CircuitError(
                    "a loop of zero-resistance parts (" + ", ".join(loop) + ") leaves its currents "
                    "undefined; give one of them its resistance",
                    components=loop,
                )


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


def _owners_near(net: Netlist, matrix: np.ndarray, variant: int) -> list[str]:
    """The components touching the nodes of the singular direction of one variant's matrix."""
    n = len(net.nodes)
    with np.errstate(all="ignore"):
        matrix = np.nan_to_num(matrix, nan=0.0, posinf=1e300, neginf=-1e300)
        _, _, vt = np.linalg.svd(matrix)
    null = np.abs(vt[-1])
    involved = {i + 1 for i in range(n - 1) if null[i] > 1e-6 * null.max()}
    names = {br.owner for br in net.branches if br.active[variant] and ({br.a, br.b} & involved)}
    names |= {s.owner for s in net.vccs if s.active[variant] and ({s.out_p, s.out_n} & involved)}
    if not names:  # the singular direction lies in branch currents only
        names = {br.owner for br in net.branches if br.active[variant] and br.ohms[variant] <= 0}
    return sorted(names)
