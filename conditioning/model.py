"""The model object every stage reads: the stiffness matrix and its context.

A :class:`Model` is built once by :func:`conditioning.load_model` (or
directly, from arrays) and never modified afterwards; stages derive what they
need from it.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Optional

import numpy as np
import scipy.sparse as sp
from numpy.typing import NDArray

# DOF_NAMES lives with the results (the renderers read it there) and is
# re-exported here, where the stages have always found it.
from conditioning.results import DOF_NAMES, ElementTable, OneTriangleExport  # noqa: F401
TRANSLATIONS = (0, 1, 2)
ROTATIONS = (3, 4, 5)

#: Dof layouts of the ``--dofs-per-node`` shortcut.
DOFS_PER_NODE_LAYOUT: dict[int, tuple[str, ...]] = {
    2: ("ux", "uy"),
    3: ("ux", "uy", "uz"),
    6: ("ux", "uy", "uz", "rx", "ry", "rz"),
}

DofIndex = NDArray[np.intp]


@dataclass(frozen=True)
class DofTable:
    """Which node and which displacement component each matrix row is.

    Attributes
    ----------
    node : (n,) int64 array
        Node id of each row, as the user numbered the nodes.
    dof : (n,) int8 array
        Index into :data:`DOF_NAMES` of each row.
    """

    node: NDArray[np.int64]
    dof: NDArray[np.int8]

    def __len__(self) -> int:
        return int(self.node.size)

    def label(self, row: int) -> str:
        """``"node 12 uy"`` for a matrix row (0-based)."""
        return f"node {int(self.node[row])} {DOF_NAMES[int(self.dof[row])]}"

    def dof_name(self, row: int) -> str:
        return DOF_NAMES[int(self.dof[row])]

    @property
    def nodes(self) -> NDArray[np.int64]:
        """Sorted unique node ids."""
        return np.unique(self.node)

    @property
    def dof_types(self) -> tuple[int, ...]:
        """Indices into :data:`DOF_NAMES` present in the model, sorted."""
        return tuple(int(d) for d in np.unique(self.dof))

    def take(self, keep: DofIndex) -> "DofTable":
        return DofTable(self.node[keep], self.dof[keep])


@dataclass(frozen=True)
class Coordinates:
    """Node positions.

    Attributes
    ----------
    node : (m,) int64 array
        Node ids, sorted ascending.
    xyz : (m, 3) float64 array
        Positions in the model's length unit; z is 0 for a 2D model.
    dim : int
        2 when the file had no z column (or all z are zero), else 3.
    """

    node: NDArray[np.int64]
    xyz: NDArray[np.float64]
    dim: int

    def lookup(self, nodes: NDArray[np.int64]) -> NDArray[np.float64]:
        """Positions of ``nodes`` (each must be present), shape (len(nodes), 3)."""
        pos = np.searchsorted(self.node, nodes)
        return self.xyz[pos]

    def has(self, nodes: NDArray[np.int64]) -> NDArray[np.bool_]:
        pos = np.clip(np.searchsorted(self.node, nodes), 0, max(self.node.size - 1, 0))
        return (self.node.size > 0) & (self.node[pos] == nodes)


@dataclass(frozen=True)
class Model:
    """An assembled linear static stiffness matrix with its model context.

    Attributes
    ----------
    K : (n, n) scipy.sparse.csr_array, float64
        Stiffness matrix, full (both triangles) storage, no explicit zeros.
        Units are the model's own (force/length, moment/rotation).
    source : str
        Where K came from (a path, or ``"<array>"``).
    dofs : DofTable or None
        Row-to-(node, dof) map; ``None`` when the user gave none.
    coords : Coordinates or None
        Node positions; ``None`` when not given.
    load : (n,) or (n, m) float64 array or None
        Load vector of the user's load case (force units), or m >= 2 load
        cases as columns.
    solution : (n,) or (n, m) float64 array or None
        A displacement vector computed elsewhere, to be audited; one column
        per load case when ``load`` has m columns.
    load_names : tuple of str
        Names of the m load cases when ``load`` has columns (the file's
        header, else ``load-1``...); empty for a single load vector.
    restrained : int
        Number of rows and columns removed by ``--fix`` restraints.
    notes : tuple of str
        Provenance notes on how the input was read (mirroring, zeros dropped,
        restraints applied), for the report.
    one_triangle : OneTriangleExport or None
        Set when the input stored one triangle plus a few stray entries of
        the other and ``K`` is its mirrored form (row indices are those of
        ``K``, after restraints were removed); None otherwise.
    """

    K: sp.csr_array
    source: str = "<array>"
    dofs: Optional[DofTable] = None
    coords: Optional[Coordinates] = None
    load: Optional[NDArray[np.float64]] = None
    solution: Optional[NDArray[np.float64]] = None
    load_names: tuple[str, ...] = ()
    restrained: int = 0
    notes: tuple[str, ...] = field(default_factory=tuple)
    one_triangle: Optional[OneTriangleExport] = None
    elements: Optional[ElementTable] = None

    @property
    def n(self) -> int:
        return int(self.K.shape[0])

    def row_label(self, row: int) -> str:
        """Human name of a matrix row: ``"node 12 uy"`` or ``"row 37"`` (1-based)."""
        if self.dofs is not None:
            return self.dofs.label(row)
        return f"row {int(row) + 1}"

    def nodes_of(self, rows) -> list[int]:
        """Sorted unique node ids of ``rows``; 1-based row numbers without a map."""
        rows = np.asarray(rows, dtype=np.intp)
        if self.dofs is None:
            return sorted(int(r) + 1 for r in np.unique(rows))
        return [int(v) for v in np.unique(self.dofs.node[rows])]

    def positions_of(self, rows) -> Optional[NDArray[np.float64]]:
        """(len(rows), 3) positions of the rows' nodes (model length unit), or
        None without a DOF map, without coordinates, or when a node has none."""
        if self.dofs is None or self.coords is None:
            return None
        nodes = self.dofs.node[np.asarray(rows, dtype=np.intp)]
        if not np.all(self.coords.has(nodes)):
            return None
        return self.coords.lookup(nodes)


#: Entries hashed per update (bounds the temporary copies to a few tens of MB).
_FINGERPRINT_CHUNK = 1 << 22


def matrix_fingerprint(K) -> str:
    """SHA-256 of K's sparsity and values, ``"sha256:<64 hex digits>"``.

    Hashed in a form that does not depend on how K was stored: CSR with
    sorted column indices and duplicates summed, explicit zeros dropped,
    shape, row pointers and column indices as little-endian int64 and the
    values as little-endian float64. Two matrices with the same fingerprint
    are the same matrix bit for bit (SHA-256 collisions aside); one pass over
    the entries, no arithmetic on them. Used to tell whether a saved report
    belongs to a matrix read later (``conditioning explain --from-report``).
    """
    import hashlib

    A = sp.csr_array(K)
    if A.dtype != np.float64 or not A.has_canonical_format or not np.all(A.data):
        A = A.astype(np.float64)  # a copy: the caller's K is left as it was
        A.sum_duplicates()
        A.eliminate_zeros()
    h = hashlib.sha256()
    h.update(np.asarray(A.shape, dtype="<i8").tobytes())
    h.update(np.asarray(A.indptr, dtype="<i8").tobytes())
    for start in range(0, A.nnz, _FINGERPRINT_CHUNK):
        part = slice(start, start + _FINGERPRINT_CHUNK)
        h.update(np.asarray(A.indices[part], dtype="<i8").tobytes())
        h.update(np.asarray(A.data[part], dtype="<f8").tobytes())
    return "sha256:" + h.hexdigest()
