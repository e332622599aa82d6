"""The nodes read as geometry: coincident nodes K does not join, and misplaced nodes.

    (Model, StructureResult, near-singular modes) => coincident groups, far nodes

Two modelling errors that no support advice can fix show in the coordinates
together with K's node graph (two nodes are *coupled* when K stores an entry
between a DOF of one and a DOF of the other; a *member* is such a pair, its
length their distance):

* **Coincident nodes that K does not join**: two meshes or two parts that
  were never merged at their interface (the pad of a bracket meshed on its
  plate; a cap meshed on a plinth). The free part shows as rigid-body modes,
  and the fix is to merge (or tie) the nodes, not to support the part.
  Coincident nodes that K joins in every DOF type they share are a zero-length
  spring or tie and are not listed; those joined in some DOF types only are a
  hinge or release modelled with duplicate nodes, and are said to be so.
* **A node far from every node it is coupled to** (a coordinate in the wrong
  unit, or a typo): its elements are grossly distorted, its rows are much
  softer than its neighbours' and the rows next to it much stiffer.

Both are found in O(m log m) for m nodes (a k-d tree for the coincident
pairs, one pass over K's entries for the node graph). Nothing here reads the
element connectivity; :mod:`conditioning.stages.element_quality` does.
"""

from __future__ import annotations

import logging
from typing import Optional, Sequence

import numpy as np
import scipy.sparse as sp
from numpy.typing import NDArray
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

from conditioning.model import DOF_NAMES, TRANSLATIONS, Model
from conditioning.results import (CoincidentNodes, FarNode, GeometryChecks, NearSingularMode, StructureResult,
                                  TouchingParts)

logger = logging.getLogger(__name__)

#: Two nodes closer than this share of the shortest member at either of them
#: are at one place. The project's choice: a mesh generator places nodes of
#: one interface within round-off (1e-12 of the model's size) and a deliberate
#: gap is a sizeable share of an element, so any share between 1e-6 and 1e-2
#: separates the two; 1e-3 is in the middle in decades.
COINCIDENT_SHARE = 1e-3
#: A node whose nearest coupled node is more than this many usual member
#: lengths away is listed as far from every node it is coupled to. The
#: project's choice, tuned on the measured ratio: at most 1.3 on the demo
#: models and on scikit-fem meshes (uniform, graded by 1.5 per element, a
#: disc, a ball), about 40 for a coordinate typed 10 times too large on a
#: plate of 50-unit elements and 3,700 for one typed 1000 times too large.
#: A node held only by one long member (a stay to an anchor that is not fully
#: restrained) can exceed it legitimately; the finding says so.
FAR_FACTOR = 8.0
#: A node of one part closer to a node of another part than this share of
#: its shortest member, with no stiffness between the parts, makes the parts
#: touch. The project's choice: nodes of a block meshed on a pedestal with an
#: offset of half an element lie at 0.71 of the member length (0.5 diagonally
#: in plane, times sqrt 2); a part a full element away is apart.
TOUCH_SHARE = 0.75
#: Two coincident nodes move apart in a near-singular mode when their relative
#: translation is at least this share of the mode's largest translation (the
#: project's choice: the modes stage names nodes from 1% of the largest).
APART_SHARE = 0.01
#: Coincident groups listed in the report at most (all are counted in
#: ``GeometryChecks.coincident_total``). The project's choice: an interface
#: of a few thousand duplicate nodes is one finding either way.
MAX_GROUPS = 2000
#: Stored entries of K beyond which the checks do not run (the node graph
#: would cost about 24 bytes per entry). The project's choice.
MAX_ENTRIES = 200_000_000

METHOD = (f"node pairs closer than {COINCIDENT_SHARE:g} x the shortest member at either node (k-d tree), "
          "joined when K stores an entry between their DOFs; nodes whose nearest coupled node is more than "
          f"{FAR_FACTOR:g} x the usual member length of their coupled nodes away")


def check_node_geometry(model: Model, structure: StructureResult,
                        modes: Sequence[NearSingularMode] = ()) -> Optional[GeometryChecks]:
    """Coincident nodes K does not join (or joins partly) and nodes far from their coupled nodes.

    Parameters
    ----------
    model : Model
        Needs a DOF map and coordinates; K gives the node graph.
    structure : StructureResult
        Its ``part_of_row`` names the parts the nodes belong to.
    modes : sequence of NearSingularMode
        The near-singular modes (``vector`` in K's DOFs): whether they move
        coincident nodes apart.

    Returns
    -------
    GeometryChecks or None
        ``coincident`` groups (see :class:`~conditioning.results.CoincidentNodes`)
        and ``far`` nodes (:class:`~conditioning.results.FarNode`), distances
        in the model's length unit; None without a DOF map or coordinates, or
        beyond :data:`MAX_ENTRIES` stored entries.
    """
    if model.dofs is None or model.coords is None or model.K.nnz > MAX_ENTRIES:
        return None
    if not np.all(model.coords.has(model.dofs.nodes)):
        return None  # a Model built by hand without every position (load_model requires them)
    graph = _NodeGraph(model)
    coincident = _coincident_groups(model, graph, structure, modes)
    far = _far_nodes(model, graph)
    touching = _touching_parts(graph, structure, modes)
    logger.info("geometry: %d coincident group(s), %d far node(s)", len(coincident), len(far))
    return GeometryChecks(method=METHOD, coincident=_cap(coincident), far=far, coincident_total=len(coincident),
                          touching=touching,
                          thresholds={"coincident_share": COINCIDENT_SHARE, "far_factor": FAR_FACTOR,
                                      "apart_share": APART_SHARE, "touch_share": TOUCH_SHARE})


#: Why the checks did not run, for ``Report.skipped``.
WHY_NOT_RUN = "the geometry checks need a DOF map and node coordinates (--dofs, --coords)"


class _NodeGraph:
    """K's node graph with member lengths; nodes are indices into ``model.dofs.nodes``."""

    def __init__(self, model: Model):
        self.nodes = model.dofs.nodes
        m = self.nodes.size
        self.row_node = np.searchsorted(self.nodes, model.dofs.node)
        self._by_node = np.argsort(self.row_node, kind="stable")
        self._first = np.searchsorted(self.row_node[self._by_node], np.arange(m + 1))
        self.xyz = model.coords.lookup(self.nodes)
        self.K = sp.csr_array(model.K)
        self.adjacency = A = _node_adjacency(self.K, self.row_node, m)
        rows = np.repeat(np.arange(m), np.diff(A.indptr))
        self.length = np.linalg.norm(self.xyz[rows] - self.xyz[A.indices], axis=1)
        # members of positive length, each row's lengths sorted ascending
        pos = self.length > 0
        P = sp.csr_array((self.length[pos], (rows[pos], A.indices[pos])), shape=(m, m))
        P.sort_indices()
        order = np.lexsort((P.data, np.repeat(np.arange(m), np.diff(P.indptr))))
        self.members = P
        self.sorted_lengths = P.data[order]
        self.sorted_to = P.indices[order]
        self.degree = np.diff(P.indptr)

    def rows_of(self, k: int) -> NDArray[np.intp]:
        """0-based rows of node index k, ascending."""
        return self._by_node[self._first[k]:self._first[k + 1]]

    def shortest(self) -> NDArray[np.float64]:
        """(m,) shortest member at each node (NaN for a node without one)."""
        out = np.full(self.nodes.size, np.nan)
        has = self.degree > 0
        out[has] = self.sorted_lengths[self.members.indptr[:-1][has]]
        return out

    def lower_median(self) -> NDArray[np.float64]:
        """(m,) lower median of each node's member lengths (NaN without a member)."""
        out = np.full(self.nodes.size, np.nan)
        has = self.degree > 0
        out[has] = self.sorted_lengths[self.members.indptr[:-1][has] + (self.degree[has] - 1) // 2]
        return out


#: Entries of K turned into node pairs at a time (bounds the temporary arrays).
_CHUNK = 1 << 22


def _node_adjacency(K: sp.csr_array, row_node: NDArray[np.intp], m: int) -> sp.csr_array:
    """(m, m) pattern of node pairs K couples (no diagonal), built a block of rows at a time."""
    A = sp.csr_array((m, m))
    start = 0
    n = K.shape[0]
    while start < n:
        stop = int(np.searchsorted(K.indptr, K.indptr[start] + _CHUNK, side="right")) - 1
        stop = min(max(stop, start + 1), n)
        lo, hi = K.indptr[start], K.indptr[stop]
        rows = np.repeat(np.arange(start, stop), np.diff(K.indptr[start:stop + 1]))
        a, b = row_node[rows], row_node[K.indices[lo:hi]]
        off = a != b
        block = sp.csr_array((np.ones(int(off.sum())), (a[off], b[off])), shape=(m, m))
        block.sum_duplicates()
        block.data[:] = 1.0
        A = A + block
        start = stop
    A.data[:] = 1.0
    return A


# ------------------------------------------------------------- coincident
def _coincident_groups(model: Model, g: _NodeGraph, structure: StructureResult,
                       modes: Sequence[NearSingularMode]) -> list[CoincidentNodes]:
    shortest = g.shortest()
    typical = float(np.nanmedian(g.length[g.length > 0])) if np.any(g.length > 0) else np.nan
    if not np.isfinite(typical):
        return []
    size = np.where(np.isfinite(shortest), shortest, typical)
    tol = COINCIDENT_SHARE * size
    tree = cKDTree(g.xyz)
    dist, _ = tree.query(g.xyz, k=2)
    candidates = np.flatnonzero(dist[:, 1] <= tol)
    pa, pb = [], []
    for i, near in zip(candidates, tree.query_ball_point(g.xyz[candidates], r=tol[candidates])):
        for j in near:
            if j > i and np.linalg.norm(g.xyz[i] - g.xyz[j]) <= min(tol[i], tol[j]):
                pa.append(i)
                pb.append(int(j))
    if not pa:
        return []
    m = g.nodes.size
    pairs = sp.csr_array((np.ones(len(pa)), (pa, pb)), shape=(m, m))
    count, label = connected_components(pairs, directed=False)
    members = np.flatnonzero(np.bincount(label, minlength=count)[label] > 1)
    node_part = np.full(m, -1, dtype=np.intp)
    node_part[g.row_node] = structure.part_of_row
    displacement = _mode_displacements(model, g, modes)
    out = []
    for lab in np.unique(label[members]):
        idx = np.flatnonzero(label == lab)
        group = _classify(model, g, idx)
        if group is None:
            continue
        joined, tied, free = group
        apart, weight = _moved_apart(idx, displacement, node_part, modes)
        order = idx[np.argsort(-weight, kind="stable")] if apart else idx
        span = max(float(np.linalg.norm(g.xyz[p] - g.xyz[q])) for p in idx for q in idx)
        out.append(CoincidentNodes(
            nodes=[int(g.nodes[k]) for k in order], position=[float(c) for c in g.xyz[order[0]]],
            separation=span, tolerance=float(np.min(tol[idx])), joined=joined, tied=tied, free=free,
            parts=sorted({int(node_part[k]) + 1 for k in idx if node_part[k] >= 0}), moved_apart_by=apart))
    out.sort(key=lambda c: (c.joined != "no", not c.moved_apart_by, c.nodes[0]))
    return out


def _cap(groups: list[CoincidentNodes]) -> list[CoincidentNodes]:
    return groups[:MAX_GROUPS]


def _classify(model: Model, g: _NodeGraph, idx: NDArray[np.intp]):
    """("no" | "partly", tied DOF names, free DOF names), or None when K ties
    every shared DOF type between them (a zero-length tie: nothing to say)."""
    if idx.size == 2:
        clusters = 1 if _stored(g.adjacency, int(idx[0]), int(idx[1])) else 2
    else:
        clusters, _ = connected_components(g.adjacency[idx][:, idx], directed=False)
    rows_of = [g.rows_of(int(k)) for k in idx]
    dof_sets = [set(int(d) for d in model.dofs.dof[r]) for r in rows_of]
    shared = sorted(set.intersection(*dof_sets))
    if clusters > 1:
        return "no", [], [DOF_NAMES[d] for d in shared]
    tied = set()
    for p in range(len(idx)):
        for q in range(p + 1, len(idx)):
            for d in shared:
                rp = rows_of[p][model.dofs.dof[rows_of[p]] == d]
                rq = rows_of[q][model.dofs.dof[rows_of[q]] == d]
                if rp.size and rq.size and _stored(g.K, int(rp[0]), int(rq[0])):
                    tied.add(d)
    free = [d for d in shared if d not in tied]
    if not free:
        return None
    return "partly", [DOF_NAMES[d] for d in sorted(tied)], [DOF_NAMES[d] for d in free]


def _stored(A: sp.csr_array, i: int, j: int) -> bool:
    """True when the CSR matrix A stores a nonzero at (i, j)."""
    lo, hi = A.indptr[i], A.indptr[i + 1]
    cols = A.indices[lo:hi]
    hit = np.flatnonzero(cols == j)
    return bool(hit.size and A.data[lo + hit[0]] != 0)


def _mode_displacements(model: Model, g: _NodeGraph, modes: Sequence[NearSingularMode]):
    """Per mode: (m, 3) translation of each node (NaN where a node lacks the
    row), or None for a mode without a vector or one of a DOF alone."""
    out = []
    for mode in modes:
        vec = getattr(mode, "vector", None)
        if vec is None or mode.kind == "dof-without-stiffness" or np.shape(vec) != (model.n,):
            out.append(None)
            continue
        U = np.full((g.nodes.size, 3), np.nan)
        t = np.isin(model.dofs.dof, TRANSLATIONS)
        U[g.row_node[t], model.dofs.dof[t]] = np.asarray(vec, dtype=np.float64)[t]
        out.append(U)
    return out


def _moved_apart(idx, displacement, node_part, modes) -> tuple[list[int], NDArray[np.float64]]:
    """1-based modes that move the group's nodes apart, and each node's motion in them."""
    apart, weight = [], np.zeros(idx.size)
    for k, (mode, U) in enumerate(zip(modes, displacement)):
        if mode.kind == "dof-without-stiffness":
            continue
        if U is None:
            parts = {int(node_part[i]) for i in idx}
            if len(parts) > 1 and (mode.part - 1) in parts:
                apart.append(k + 1)
                weight += np.array([1.0 if node_part[i] == mode.part - 1 else 0.0 for i in idx])
            continue
        top = float(np.nanmax(np.abs(U))) if np.any(np.isfinite(U)) else 0.0
        if top == 0.0:
            continue
        here = np.nan_to_num(U[idx])
        rel = max(float(np.linalg.norm(here[p] - here[q])) for p in range(idx.size) for q in range(idx.size))
        if rel >= APART_SHARE * top:
            apart.append(k + 1)
            weight += np.linalg.norm(here, axis=1)
    return apart, weight


# ---------------------------------------------------------- touching parts
def _touching_parts(g: _NodeGraph, structure: StructureResult,
                    modes: Sequence[NearSingularMode]) -> list[TouchingParts]:
    """Pairs of counted parts whose nodes come within TOUCH_SHARE of a member
    length of each other without coinciding; each pair once, from the side of
    the part with free modes when one has them."""
    if structure.parts < 2:
        return []
    node_part = np.full(g.nodes.size, -1, dtype=np.intp)
    node_part[g.row_node] = structure.part_of_row
    shortest = g.shortest()
    typical = float(np.nanmedian(shortest)) if np.any(np.isfinite(shortest)) else np.nan
    if not np.isfinite(typical):
        return []
    size = np.where(np.isfinite(shortest), shortest, typical)
    free = {p: [k + 1 for k, m in enumerate(modes) if m.kind != "dof-without-stiffness" and m.part == p + 1]
            for p in range(structure.parts)}
    found: dict[frozenset, TouchingParts] = {}
    for p in range(structure.parts):
        mine = np.flatnonzero(node_part == p)
        others = np.flatnonzero((node_part >= 0) & (node_part < structure.parts) & (node_part != p))
        if not mine.size or not others.size:
            continue
        d, j = cKDTree(g.xyz[others]).query(g.xyz[mine])
        close = (d <= TOUCH_SHARE * size[mine]) & (d > COINCIDENT_SHARE * size[mine])
        if not close.any():
            continue
        near = others[j[close]]
        q = int(np.bincount(node_part[near]).argmax())
        close_to_q = close.copy()
        close_to_q[close] = node_part[near] == q
        key = frozenset((p, q))
        if key in found and (found[key].moved_apart_by or not free[p]):
            continue
        ratio = d / size[mine]
        found[key] = TouchingParts(
            part=p + 1, other_part=q + 1, gap=float(d[close_to_q].min()), share=float(ratio[close_to_q].min()),
            nodes=[int(v) for v in g.nodes[mine[close_to_q]]],
            other_nodes=sorted({int(v) for v in g.nodes[others[j[close_to_q]]]}), moved_apart_by=free[p])
    return sorted(found.values(), key=lambda t: (not t.moved_apart_by, t.part))


# -------------------------------------------------------------- far nodes
def _far_nodes(model: Model, g: _NodeGraph) -> list[FarNode]:
    usual_own = g.lower_median()
    nearest = g.shortest()
    P = g.members
    out = []
    # the usual length where v attaches: median over its coupled nodes u (with
    # another member besides the one to v) of u's lower-median member length
    has_other = g.degree >= 2
    # a screen in one pass: the median over v's coupled nodes is at least their minimum
    value = np.where(has_other[P.indices], usual_own[P.indices], np.inf)
    smallest = np.full(g.nodes.size, np.inf)
    has = g.degree > 0
    smallest[has] = np.minimum.reduceat(value, P.indptr[:-1][has])
    candidates = np.flatnonzero(has & (nearest > FAR_FACTOR * smallest))
    for v in candidates:
        nb = P.indices[P.indptr[v]:P.indptr[v + 1]]
        nb = nb[has_other[nb]]
        if nb.size == 0:
            continue
        usual = float(np.median(usual_own[nb]))
        if not usual > 0 or nearest[v] <= FAR_FACTOR * usual:
            continue
        out.append(_far_node(model, g, int(v), float(nearest[v]), usual))
    out.sort(key=lambda f: -f.ratio)
    return out


def _far_node(model: Model, g: _NodeGraph, v: int, nearest: float, usual: float) -> FarNode:
    P = g.members
    lo, hi = P.indptr[v], P.indptr[v + 1]
    nb = P.indices[lo:hi]
    near = int(nb[np.argmin(P.data[lo:hi])])
    d = np.abs(model.K.diagonal())
    t = np.isin(model.dofs.dof, TRANSLATIONS)
    own = g.rows_of(v)[t[g.rows_of(v)]]
    theirs = np.flatnonzero(np.isin(g.row_node, nb) & t)
    softer = None
    if own.size and theirs.size and np.median(d[own]) > 0:
        softer = float(np.median(d[theirs]) / np.median(d[own]))
    return FarNode(node=int(g.nodes[v]), position=[float(c) for c in g.xyz[v]], nearest=nearest,
                   nearest_node=int(g.nodes[near]), usual_length=usual, ratio=nearest / usual,
                   neighbours=[int(g.nodes[k]) for k in np.sort(nb)],
                   softer=softer, rows=[int(r) for r in np.flatnonzero(g.row_node == v)])
