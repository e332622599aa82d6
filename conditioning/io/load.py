"""Building a :class:`~conditioning.model.Model` from the user's files or arrays.

``load_model`` reads the stiffness matrix (:mod:`conditioning.io.matrix_formats`),
the optional DOF map, node coordinates, load and solution vectors, applies
restraints by removing their rows and columns, and records every step as a
note for the report. Everything that does not fit together raises
:class:`~conditioning.errors.InputError` naming the file and the line.

File layouts (comma-separated text; a header line is optional, blank lines
and lines starting with ``#`` are skipped):

* DOF map: ``node,dof``, one line per matrix row in row order; ``node`` an
  integer id, ``dof`` one of ``ux, uy, uz, rx, ry, rz``.
* Coordinates: ``node,x,y,z`` (``z`` may be left out: a 2D model).
* Restraints: ``node,dof``, one line per restrained degree of freedom.
* Load and solution: one value per line, or a Matrix Market n x 1 file; several
  load cases as m columns (CSV ``n x m`` with an optional header naming the
  cases, or a Matrix Market ``n x m`` file), and a solution with the same m columns.
"""

from __future__ import annotations

import logging
import os
import re
from collections.abc import Mapping
from dataclasses import replace
from typing import Optional, Sequence, Union

import numpy as np
import scipy.io
import scipy.sparse as sp
from numpy.typing import ArrayLike, NDArray

from conditioning.errors import InputError
from conditioning.io.matrix_formats import (
    assemble_symmetric,
    is_number,
    mirror_one_triangle_export,
    parse_float,
    read_csv_rows,
    read_matrix,
    read_vector,
    require_memory_for_entries,
    text_read_cap,
)
from conditioning.io.outputs import require_regular_file
from conditioning.model import DOF_NAMES, DOFS_PER_NODE_LAYOUT, Coordinates, DofTable, Model
from conditioning.results import OneTriangleExport

logger = logging.getLogger(__name__)

ARRAY_SOURCE = "<array>"
PathLike = Union[str, "os.PathLike[str]"]
MatrixInput = Union[PathLike, sp.sparray, sp.spmatrix, np.ndarray]
DofPairs = Sequence[tuple[int, Union[str, int]]]

_DOF_INDEX = {name: k for k, name in enumerate(DOF_NAMES)}
#: DOF codes 1..6 for ux, uy, uz, rx, ry, rz, a widespread convention in
#: exported DOF lists; accepted as text in ``--dofs`` files (never as the
#: 0-based integer indices of an in-memory map).
DOF_CODES = {str(k + 1): k for k in range(len(DOF_NAMES))}
_FIRST_SHOWN = 3
#: Node ids are stored as int64: the range a DOF map, coordinates and restraints may use.
NODE_ID_MIN, NODE_ID_MAX = int(np.iinfo(np.int64).min), int(np.iinfo(np.int64).max)
#: Names the digits stage gives its own samples (``random-1``..., ``worst-case``); a load case
#: may not take one, or two rows of the digits table would carry the same name.
RESERVED_SAMPLE_NAME = re.compile(r"^(random-\d+|worst-case)$", re.IGNORECASE)


def load_model(
    matrix: MatrixInput,
    *,
    dofs: Union[PathLike, DofTable, DofPairs, None] = None,
    dofs_per_node: Optional[int] = None,
    coords: Union[PathLike, Coordinates, ArrayLike, Mapping, None] = None,
    load: Union[PathLike, ArrayLike, None] = None,
    solution: Union[PathLike, ArrayLike, None] = None,
    fix: Union[PathLike, DofPairs, None] = None,
    elements=None,
    basis=None,
    mesh=None,
) -> Model:
    """Read a stiffness matrix and its model context into a :class:`Model`.

    Parameters
    ----------
    matrix : path, scipy sparse matrix or (n, n) ndarray
        Matrix Market or Harwell-Boeing file (see
        :func:`conditioning.io.matrix_formats.read_matrix`), or the matrix itself
        (source ``"<array>"``); units force/length, moment/rotation.
    dofs : path, DofTable or sequence of (node, dof) pairs, optional
        Which node and component each matrix row is, in row order. A pair's
        ``dof`` is a name (``"ux"`` ... ``"rz"``) or its index 0-5.
    dofs_per_node : {2, 3, 6} or sequence of DOF names, optional
        Shortcut instead of ``dofs``: nodes 1..N in row order, each with the
        layout :data:`conditioning.model.DOFS_PER_NODE_LAYOUT` ``[K]``, or
        with the DOFs named (``("ux", "uy", "rz")`` for a 2D frame, whose
        in-plane rotation the number 3 would read as uz).
    coords : path, Coordinates, (m, 3) or (m, 4) array, or mapping, optional
        Node positions: file ``node,x,y[,z]``; an array with the same columns
        (node id first); or ``{node: (x, y[, z])}``. Needs a DOF map.
    load, solution : path or (n,) array, optional
        Load vector (force units) and a displacement vector computed
        elsewhere (length units), both over all ``n`` matrix rows.
    fix : path or sequence of (node, dof) pairs, optional
        Restrained degrees of freedom; their rows and columns are removed
        from the matrix, the vectors and the DOF map. Needs a DOF map.
    elements : path, mapping {element id: node ids} or sequence of (id, node ids), optional
        Element connectivity (:mod:`conditioning.io.elements`: file
        ``id,node,node,...``; the kind from the node count and the model's
        dimension). Needs coordinates; turns on the element-shape checks and
        the real cells of the mode files.
    basis : scikit-fem Basis, optional
        A vector basis whose every DOF sits at a vertex: gives the DOF map
        (``basis.nodal_dofs``), the coordinates and the elements of its mesh
        (:func:`conditioning.io.mesh_context.from_basis`) where ``dofs``,
        ``coords`` and ``elements`` are not given.
    mesh : path, optional
        A mesh file meshio reads (Gmsh, VTK/VTU, XDMF; the optional ``mesh``
        extra): coordinates and elements, linked to K's rows through the DOF
        map (:func:`conditioning.io.mesh_context.read_mesh`). Not with ``coords``.

    Returns
    -------
    Model
        ``K`` in full symmetric CSR storage (float64, no stored zeros),
        restrained rows removed, ``restrained`` their count and ``notes``
        one sentence per thing the reader did. A matrix stored as one
        triangle plus a few stray entries of the other is mirrored
        (:func:`conditioning.io.matrix_formats.mirror_one_triangle_export`) and
        ``one_triangle`` says where the strays were.

    Raises
    ------
    InputError
        Any file missing, empty or malformed, or parts that do not fit
        together (lengths, unknown dof names, duplicate (node, dof) pairs,
        coordinates missing for mapped nodes, restraints not in the map).

    Examples
    --------
    >>> import numpy as np
    >>> K = np.array([[2.0, -1.0, 0.0], [-1.0, 2.0, -1.0], [0.0, -1.0, 1.0]])
    >>> model = load_model(K, fix=None)
    >>> model.n, model.source
    (3, '<array>')
    """
    for value in (matrix, dofs, coords, load, solution, fix, elements, mesh):
        if _is_path(value):
            require_regular_file(str(value))
    K, source, notes = _reading(matrix, lambda: _read_stiffness(matrix))
    _require_some_stiffness(K, source, "")
    _note_extreme_entries(K, notes)
    K, one_triangle = mirror_one_triangle_export(K, notes)
    n = int(K.shape[0])
    if basis is not None:
        from conditioning.io.mesh_context import from_basis
        b_dofs, b_coords, b_elements = from_basis(basis, n)
        dofs = b_dofs if dofs is None and dofs_per_node is None else dofs
        coords = b_coords if coords is None else coords
        elements = b_elements if elements is None else elements
        notes.append("DOF map, coordinates and elements from the scikit-fem basis")
    if mesh is not None:
        if coords is not None:
            raise InputError(str(mesh), "give either a mesh file or coordinates, not both")
        from conditioning.io.mesh_context import read_mesh
        coords, m_elements = read_mesh(str(mesh))
        elements = m_elements if elements is None else elements
        notes.append(f"coordinates and elements from the mesh {mesh}")
    table = _reading(dofs, lambda: _dof_map(dofs, dofs_per_node, n, source, notes))
    positions = _reading(coords, lambda: _coordinates(coords, table, notes))
    element_table = None
    if elements is not None:
        from conditioning.io.elements import read_elements
        element_table = _reading(elements, lambda: read_elements(elements, positions, table))
        kinds = np.unique(element_table.kind, return_counts=True)
        from conditioning.results import ELEMENT_KINDS
        notes.append(f"elements from {element_table.source}: {len(element_table):,} ("
                     + ", ".join(f"{c:,} {ELEMENT_KINDS[k]}" for k, c in zip(*kinds)) + ")")
    f, load_names = _reading(load, lambda: _vector(load, n, "load", notes))
    u, _ = _reading(solution, lambda: _vector(solution, n, "solution", notes))
    _require_matching_columns(solution, u, load, f)
    restrained = 0
    if fix is not None:
        keep, restrained = _restraint_rows(fix, table, n, notes)
        K = _principal_submatrix(K, keep)
        _require_some_stiffness(K, source, f" once the restraints of {fix if _is_path(fix) else 'the fix list'} "
                                           "are removed")
        one_triangle = _restrict_export(one_triangle, keep, n)
        table = table.take(keep) if table is not None else None
        f = f[keep] if f is not None else None
        u = u[keep] if u is not None else None
    logger.info("model %s: n = %d, %d restrained", source, K.shape[0], restrained)
    return Model(K=K, source=source, dofs=table, coords=positions, load=f, solution=u,
                 load_names=load_names, restrained=restrained, notes=tuple(notes), one_triangle=one_triangle,
                 elements=element_table)


# --------------------------------------------------------------------------- #
# Matrix
# --------------------------------------------------------------------------- #


def _is_path(value) -> bool:
    return isinstance(value, (str, os.PathLike))


def _reading(value, read):
    """``read()``; a MemoryError while reading a file becomes an InputError naming that file."""
    try:
        return read()
    except MemoryError:
        where = str(value) if _is_path(value) else ARRAY_SOURCE
        raise InputError(where, "too large to read in the memory available (raise CONDITIONING_MEMORY_LIMIT "
                                "only if the machine has the memory)") from None


def _note_extreme_entries(K: sp.csr_array, notes: list[str]) -> None:
    """A note when K holds subnormal entries (magnitude below the smallest normal float64)."""
    tiny = int(np.count_nonzero(np.abs(K.data) < np.finfo(np.float64).tiny))
    if tiny:
        notes.append(f"{tiny} entr{'y is' if tiny == 1 else 'ies are'} subnormal (magnitude below "
                     f"{np.finfo(np.float64).tiny:.1e}): they carry fewer than 53 significant bits, and "
                     "displacements for loads of ordinary size overflow float64; rescale the export's units")


def _require_some_stiffness(K: sp.csr_array, source: str, when: str) -> None:
    """An all-zero matrix (no entries, or only zeros) holds no stiffness at all: unusable input."""
    if K.nnz == 0:
        raise InputError(source, f"every entry of the {K.shape[0]} x {K.shape[0]} matrix is zero{when}: "
                                 "it holds no stiffness (was the export taken before assembly?)")


def _read_stiffness(matrix) -> tuple[sp.csr_array, str, list[str]]:
    if _is_path(matrix):
        K, notes = read_matrix(matrix)
        return K, str(matrix), list(notes)
    if sp.issparse(matrix) or isinstance(matrix, np.ndarray):
        notes: list[str] = []
        return _matrix_from_array(matrix, notes), ARRAY_SOURCE, notes
    raise InputError(ARRAY_SOURCE, f"expected a file path or a matrix, got {type(matrix).__name__}")


def _matrix_from_array(A, notes: list[str]) -> sp.csr_array:
    if A.ndim != 2 or A.shape[0] != A.shape[1]:
        raise InputError(ARRAY_SOURCE, f"matrix has shape {A.shape}; a stiffness matrix must be square")
    if A.shape[0] == 0:
        raise InputError(ARRAY_SOURCE, "matrix has no rows (order 0)")
    if np.iscomplexobj(A) if not sp.issparse(A) else np.iscomplexobj(A.data):
        raise InputError(ARRAY_SOURCE, "holds complex values; a stiffness matrix must be real")
    try:
        if sp.issparse(A):
            coo = sp.coo_array(A)
            rows, cols, vals = coo.row, coo.col, np.asarray(coo.data, dtype=np.float64)
        else:
            dense = np.asarray(A, dtype=np.float64)
            rows, cols = np.nonzero(dense)
            vals = dense[rows, cols]
    except (TypeError, ValueError) as exc:
        raise InputError(ARRAY_SOURCE, f"values cannot be converted to float64 ({exc})") from None
    notes.append(f"took a {A.shape[0]} x {A.shape[0]} matrix given as an array")
    return assemble_symmetric(rows, cols, vals, int(A.shape[0]), stored="general",
                              source=ARRAY_SOURCE, notes=notes)


def _restrict_export(export: Optional[OneTriangleExport], keep: NDArray[np.intp],
                     n: int) -> Optional[OneTriangleExport]:
    """The stray entries renumbered to the kept rows; those in removed rows or columns dropped."""
    if export is None:
        return None
    new_index = np.full(n, -1, dtype=np.intp)
    new_index[keep] = np.arange(keep.size)
    r, c = new_index[export.stray_rows], new_index[export.stray_cols]
    kept = (r >= 0) & (c >= 0)
    if not kept.any():
        return None
    return replace(export, stray_rows=r[kept], stray_cols=c[kept], stray_paired=export.stray_paired[kept])


def _principal_submatrix(K: sp.csr_array, keep: NDArray[np.intp]) -> sp.csr_array:
    sub = sp.csr_array(K[keep, :][:, keep])
    sub.sort_indices()
    return sub


# --------------------------------------------------------------------------- #
# DOF map
# --------------------------------------------------------------------------- #


def _dof_map(dofs, dofs_per_node, n: int, matrix_source: str, notes: list[str]) -> Optional[DofTable]:
    if dofs is not None and dofs_per_node is not None:
        where = str(dofs) if _is_path(dofs) else ARRAY_SOURCE
        raise InputError(where, "give either a DOF map or a number of dofs per node, not both")
    if dofs_per_node is not None:
        return _uniform_dof_map(dofs_per_node, n, matrix_source, notes)
    if dofs is None:
        return None
    if _is_path(dofs):
        source = str(dofs)
        node, dof, lines, codes = _dof_pairs_from_csv(source)
        if codes:
            notes.append(f"DOF codes 1-6 in {source} read as {', '.join(DOF_NAMES)}")
    elif isinstance(dofs, DofTable):
        source, lines = ARRAY_SOURCE, None
        node, dof = np.asarray(dofs.node, dtype=np.int64), np.asarray(dofs.dof, dtype=np.int8)
    else:
        source, lines = ARRAY_SOURCE, None
        node, dof = _dof_pairs_from_sequence(dofs, source)
    if node.size != n:
        raise InputError(source, f"DOF map has {node.size} rows but the matrix has {n} rows")
    _require_unique_pairs(source, node, dof, lines)
    table = DofTable(node=node, dof=dof)
    names = ", ".join(DOF_NAMES[d] for d in table.dof_types)
    notes.append(f"DOF map from {source}: {n} row{'s' if n != 1 else ''} on {table.nodes.size} "
                 f"node{'s' if table.nodes.size != 1 else ''} ({names})")
    return table


def _uniform_dof_map(k, n: int, matrix_source: str, notes: list[str]) -> DofTable:
    if isinstance(k, (list, tuple)):
        return _named_dof_map(tuple(k), n, matrix_source, notes)
    if isinstance(k, bool) or not isinstance(k, (int, np.integer)) or int(k) not in DOFS_PER_NODE_LAYOUT:
        raise InputError(matrix_source, f"dofs per node must be one of {sorted(DOFS_PER_NODE_LAYOUT)}, got {k!r}")
    k = int(k)
    if n % k:
        raise InputError(matrix_source, f"matrix has {n} rows, not a multiple of {k} dofs per node")
    layout = np.array([_DOF_INDEX[name] for name in DOFS_PER_NODE_LAYOUT[k]], dtype=np.int8)
    nodes = n // k
    notes.append(f"DOF map assumed: {nodes} nodes numbered 1..{nodes} in row order, "
                 f"{k} dofs per node ({', '.join(DOFS_PER_NODE_LAYOUT[k])})")
    return DofTable(node=np.repeat(np.arange(1, nodes + 1, dtype=np.int64), k), dof=np.tile(layout, nodes))


def _named_dof_map(names: tuple, n: int, matrix_source: str, notes: list[str]) -> DofTable:
    """A regular map whose node layout is given by DOF names (``ux`` ... ``rz``)."""
    bad = [str(x) for x in names if str(x).lower() not in _DOF_INDEX]
    if not names or bad:
        raise InputError(matrix_source, f"DOF names must be among {', '.join(DOF_NAMES)}"
                         + (f", got {', '.join(bad)}" if bad else ", got none"))
    layout = [_DOF_INDEX[str(x).lower()] for x in names]
    if len(set(layout)) != len(layout):
        raise InputError(matrix_source, f"DOF names repeat: {', '.join(map(str, names))}")
    k = len(layout)
    if n % k:
        raise InputError(matrix_source, f"matrix has {n} rows, not a multiple of {k} dofs per node")
    nodes = n // k
    notes.append(f"DOF map assumed: {nodes} nodes numbered 1..{nodes} in row order, "
                 f"{k} dofs per node ({', '.join(DOF_NAMES[i] for i in layout)}, as named)")
    return DofTable(node=np.repeat(np.arange(1, nodes + 1, dtype=np.int64), k),
                    dof=np.tile(np.array(layout, dtype=np.int8), nodes))


def _header_columns(source: str, rows, required: tuple[str, ...], optional: tuple[str, ...] = ()):
    """Column positions from a header line, or None when the first line is data."""
    line_no, cells = rows[0]
    if _is_int(cells[0]):
        return None
    names = [c.lower() for c in cells]
    positions = {}
    for col in required + optional:
        if col in names:
            positions[col] = names.index(col)
        elif col in required:
            raise InputError(source, f"line {line_no}: header {','.join(cells)!r} lacks a {col!r} column "
                                     f"(expected {','.join(required + optional)})")
    return positions


def _parse_node(source: str, cell: str, line_no: int) -> int:
    if not _is_int(cell):
        raise InputError(source, f"line {line_no}: node {cell!r} is not an integer")
    node = int(cell)
    if not NODE_ID_MIN <= node <= NODE_ID_MAX:
        raise InputError(source, f"line {line_no}: node {cell.strip()[:40]} is outside the node ids this tool "
                                 f"stores ({NODE_ID_MIN} to {NODE_ID_MAX}, 64-bit integers)")
    return node


def _parse_dof(source: str, cell, line_no: Optional[int]) -> int:
    where = f"line {line_no}: " if line_no is not None else ""
    if isinstance(cell, (int, np.integer)) and not isinstance(cell, bool):
        if 0 <= int(cell) < len(DOF_NAMES):
            return int(cell)
        raise InputError(source, f"{where}dof index {int(cell)} is not in 0..{len(DOF_NAMES) - 1}")
    name = str(cell).strip().lower()
    if name in DOF_CODES:
        return DOF_CODES[name]
    if name not in _DOF_INDEX:
        raise InputError(source, f"{where}unknown dof {str(cell)!r}; use one of {', '.join(DOF_NAMES)}")
    return _DOF_INDEX[name]


def _csv_pairs(source: str) -> tuple[list[int], list[int], list[int]]:
    """(node, dof index, line number) triples of a ``node,dof`` CSV file."""
    rows = read_csv_rows(source)
    header = _header_columns(source, rows, ("node", "dof"))
    if header is not None:
        rows = rows[1:]
    ni, di = (header["node"], header["dof"]) if header else (0, 1)
    nodes, dofs, lines = [], [], []
    for line_no, cells in rows:
        if len(cells) <= max(ni, di):
            raise InputError(source, f"line {line_no}: expected node,dof, found {','.join(cells)!r}")
        nodes.append(_parse_node(source, cells[ni], line_no))
        dofs.append(_parse_dof(source, cells[di], line_no))
        lines.append(line_no)
    return nodes, dofs, lines


def _fast_table(source: str, columns: tuple[str, ...]) -> Optional[NDArray]:
    """The named columns of a plain CSV file as an (m, len(columns)) string array, or None.

    A fast path for large, regular files: only when the first line is a
    header naming every one of ``columns`` (any order, other columns allowed)
    and every other line is a data line with as many cells as the header.
    Anything else (comments, blank lines, quoting, no header) returns None
    and the line-by-line reader, which names the offending line, takes over.
    """
    try:
        if os.path.getsize(source) > text_read_cap():
            return None  # the line-by-line reader refuses it in one line, naming the file
        with open(source, "rb") as fh:
            data = fh.read()
        text = data.decode("utf-8-sig")
    except (OSError, UnicodeDecodeError):
        return None
    if "\x00" in text or '"' in text or "#" in text:
        return None
    lines = text.splitlines()
    if len(lines) < 2:
        return None
    names = [c.strip().lower() for c in lines[0].split(",")]
    if not all(c in names for c in columns) or len(set(names)) != len(names):
        return None
    body = lines[1:]
    if not body[-1].strip():
        body = body[:-1]
    ncols = len(names)
    cells = ",".join(body).split(",")
    if not body or len(cells) != ncols * len(body) or any(not line.strip() for line in body):
        return None
    table = np.array(cells, dtype=str).reshape(len(body), ncols)
    return np.char.strip(table[:, [names.index(c) for c in columns]])


def _uses_dof_codes(source: str) -> bool:
    """True when a ``node,dof`` file names its DOFs by the codes 1-6."""
    rows = read_csv_rows(source)
    header = _header_columns(source, rows, ("node", "dof"))
    di = 1 if header is None else header["dof"]
    return any(len(cells) > di and cells[di].strip() in DOF_CODES for _, cells in rows)


def _dof_pairs_from_csv(source: str):
    """(node, dof, line numbers, True when the DOFs are named by the codes 1-6)."""
    table = _fast_table(source, ("node", "dof"))
    if table is not None:
        try:
            node = table[:, 0].astype(np.int64)
            names, inverse = np.unique(np.char.lower(table[:, 1]), return_inverse=True)
            index = {**_DOF_INDEX, **DOF_CODES}
            if all(str(v) in index for v in names):
                dof = np.array([index[str(v)] for v in names], dtype=np.int8)[inverse.ravel()]
                codes = any(str(v) in DOF_CODES for v in names)
                return node, dof, list(range(2, node.size + 2)), codes
        except (ValueError, OverflowError):
            pass  # a bad cell: the line-by-line reader says which
    nodes, dofs, lines = _csv_pairs(source)
    return np.asarray(nodes, dtype=np.int64), np.asarray(dofs, dtype=np.int8), lines, _uses_dof_codes(source)


def _dof_pairs_from_sequence(pairs, source: str):
    nodes, dofs = [], []
    try:
        for node, dof in pairs:
            if isinstance(node, (bool, np.bool_)) or int(node) != node:
                raise InputError(source, f"node {node!r} is not an integer")
            nodes.append(int(node))
            dofs.append(_parse_dof(source, dof, None))
    except InputError:
        raise
    except (TypeError, ValueError):
        raise InputError(source, "expected a DofTable or a sequence of (node, dof) pairs") from None
    return np.asarray(nodes, dtype=np.int64), np.asarray(dofs, dtype=np.int8)


def _require_unique_pairs(source: str, node, dof, lines: Optional[list[int]]) -> None:
    node, dof = np.asarray(node, dtype=np.int64), np.asarray(dof, dtype=np.int64)
    order = np.lexsort((dof, node))  # sorted by (node, dof) without forming node * 6 + dof, which wraps
    same = np.flatnonzero((node[order][1:] == node[order][:-1]) & (dof[order][1:] == dof[order][:-1]))
    if same.size:
        a, b = int(order[same[0]]), int(order[same[0] + 1])
        where = (f"lines {lines[a]} and {lines[b]}" if lines is not None else f"rows {a + 1} and {b + 1}")
        raise InputError(source, f"{where} both map node {int(node[a])} {DOF_NAMES[int(dof[a])]} "
                                 f"(duplicate (node, dof) pair)")


# --------------------------------------------------------------------------- #
# Coordinates
# --------------------------------------------------------------------------- #


def _coordinates(coords, table: Optional[DofTable], notes: list[str]) -> Optional[Coordinates]:
    if coords is None:
        return None
    source = str(coords) if _is_path(coords) else ARRAY_SOURCE
    if table is None:
        raise InputError(source, "coordinates need a DOF map (a dofs file or dofs per node) "
                                 "to link nodes to matrix rows")
    if _is_path(coords):
        node, xyz, has_z, lines = _coordinates_from_csv(source)
    elif isinstance(coords, Coordinates):
        node, xyz, has_z, lines = np.asarray(coords.node, np.int64), np.asarray(coords.xyz, np.float64), \
            coords.dim == 3, None
    else:
        node, xyz, has_z, lines = _coordinates_from_array(coords, source)
    _require_unique_nodes(source, node, lines)
    if not np.all(np.isfinite(xyz)):
        bad = np.flatnonzero(~np.all(np.isfinite(xyz), axis=1))
        raise InputError(source, f"{bad.size} nodes have NaN or Inf coordinates "
                                 f"(first: node {int(node[bad[0]])})")
    order = np.argsort(node, kind="stable")
    dim = 3 if has_z and np.any(xyz[:, 2] != 0.0) else 2
    positions = Coordinates(node=node[order], xyz=xyz[order], dim=dim)
    missing = np.setdiff1d(table.nodes, positions.node)
    if missing.size:
        first = ", ".join(str(int(v)) for v in missing[:_FIRST_SHOWN])
        raise InputError(source, f"coordinates missing for {missing.size} node{'s' if missing.size != 1 else ''} of the DOF map (first: {first})")
    notes.append(f"coordinates from {source}: {node.size} nodes, {dim}D")
    return positions


def _coordinates_from_csv(source: str):
    for header in (("node", "x", "y", "z"), ("node", "x", "y")):
        ncols = len(header)
        table = _fast_table(source, header)
        if table is None:
            continue
        try:
            node = table[:, 0].astype(np.int64)
            xyz = np.zeros((node.size, 3))
            xyz[:, : ncols - 1] = table[:, 1:].astype(np.float64)
        except (ValueError, OverflowError):
            break  # a bad cell: the line-by-line reader says which
        if np.all(np.isfinite(xyz)):
            return node, xyz, ncols == 4, list(range(2, node.size + 2))
        break
    rows = read_csv_rows(source)
    header = _header_columns(source, rows, ("node", "x", "y"), ("z",))
    if header is not None:
        rows = rows[1:]
        cols = [header["node"], header["x"], header["y"]] + ([header["z"]] if "z" in header else [])
    else:
        width = len(rows[0][1])
        if width not in (3, 4):
            raise InputError(source, f"line {rows[0][0]}: expected node,x,y or node,x,y,z, found {width} cells")
        cols = list(range(width))
    has_z = len(cols) == 4
    nodes, xyz, lines = [], [], []
    for line_no, cells in rows:
        if len(cells) <= max(cols) or (len(cells) > len(cols) and header is None):
            raise InputError(source, f"line {line_no}: expected {len(cols)} cells, found {len(cells)}")
        nodes.append(_parse_node(source, cells[cols[0]], line_no))
        point = [parse_float(source, cells[c], line_no, axis) for c, axis in zip(cols[1:], "xyz")]
        xyz.append(point + [0.0] * (3 - len(point)))
        lines.append(line_no)
    if not nodes:
        raise InputError(source, "no coordinate lines after the header")
    return np.asarray(nodes, np.int64), np.asarray(xyz, np.float64), has_z, lines


def _coordinates_from_array(coords, source: str):
    if isinstance(coords, Mapping):
        items = sorted(coords.items())
        try:
            node = np.asarray([k for k, _ in items], dtype=np.int64)
            points = [np.asarray(v, dtype=np.float64).ravel() for _, v in items]
        except (TypeError, ValueError):
            raise InputError(source, "coordinates mapping must be {node: (x, y[, z])}") from None
        widths = {p.size for p in points}
        if not widths <= {2, 3} or len(widths) > 1:
            raise InputError(source, "coordinates mapping values must all be (x, y) or all (x, y, z)")
        table = np.column_stack([node, np.vstack(points)]) if points else np.empty((0, 3))
    else:
        try:
            table = np.asarray(coords, dtype=np.float64)
        except (TypeError, ValueError):
            raise InputError(source, "coordinates must be an (m, 3) or (m, 4) array node,x,y[,z]") from None
    if table.ndim != 2 or table.shape[1] not in (3, 4) or table.shape[0] == 0:
        raise InputError(source, f"coordinates array has shape {table.shape}; expected (m, 3) or (m, 4) "
                                 "with columns node,x,y[,z]")
    node_col = table[:, 0]
    if not np.all(np.isfinite(node_col)) or np.any(node_col != np.round(node_col)):
        raise InputError(source, "first coordinates column (node id) must hold integers")
    xyz = np.zeros((table.shape[0], 3))
    xyz[:, : table.shape[1] - 1] = table[:, 1:]
    return node_col.astype(np.int64), xyz, table.shape[1] == 4, None


def _require_unique_nodes(source: str, node, lines: Optional[list[int]]) -> None:
    order = np.argsort(node, kind="stable")
    same = np.flatnonzero(node[order][1:] == node[order][:-1])
    if same.size:
        a, b = int(order[same[0]]), int(order[same[0] + 1])
        where = f"lines {lines[a]} and {lines[b]}" if lines is not None else f"rows {a + 1} and {b + 1}"
        raise InputError(source, f"{where} both give coordinates of node {int(node[a])}")


# --------------------------------------------------------------------------- #
# Vectors and restraints
# --------------------------------------------------------------------------- #


def _vector(value, n: int, what: str, notes: list[str]) -> tuple[Optional[NDArray[np.float64]], tuple[str, ...]]:
    """The load or solution as (n,) float64 (one case) or (n, m) (m >= 2 cases),
    and the case names (header cells, else ``load-1``...; empty for one case)."""
    if value is None:
        return None, ()
    if _is_path(value):
        if _column_count(str(value)) <= 1:
            vec = read_vector(value, n, what)
            notes.append(f"{what} vector from {value}")
            return vec, ()
        block, names = _read_columns(str(value), n, what)
        notes.append(f"{what}: {block.shape[1]} load cases from {value}")
        return block, names
    try:
        vec = np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError):
        raise InputError(ARRAY_SOURCE, f"the {what} vector cannot be converted to float64") from None
    if vec.ndim == 2 and 1 in vec.shape:
        vec = vec.ravel()
    if not (vec.ndim in (1, 2) and vec.shape[0] == n):
        raise InputError(ARRAY_SOURCE, f"the {what} vector has shape {vec.shape} but the matrix has {n} rows")
    bad = np.flatnonzero(~np.isfinite(vec.reshape(n, -1)).all(axis=1))
    if bad.size:
        first = ", ".join(str(int(k) + 1) for k in bad[:_FIRST_SHOWN])
        raise InputError(ARRAY_SOURCE, f"the {what} vector has {bad.size} NaN or Inf values (first at rows {first})"
                         if vec.ndim == 1 else
                         f"the {what} block has NaN or Inf values in {bad.size} rows (first at rows {first})")
    notes.append(f"{what} vector given as an array" if vec.ndim == 1
                 else f"{what}: {vec.shape[1]} load cases given as an array")
    return vec.copy(), _default_case_names(vec.shape[1]) if vec.ndim == 2 else ()


def _default_case_names(m: int) -> tuple[str, ...]:
    return tuple(f"load-{k + 1}" for k in range(m))


def _column_count(name: str) -> int:
    """Columns of a load or solution file: 1 for a vector (or a file the
    vector reader will reject with its own message)."""
    try:
        rows, cols, *_ = scipy.io.mminfo(name)
        return 1 if 1 in (rows, cols) else int(cols)
    except (OSError, ValueError, TypeError, IndexError):
        pass  # not Matrix Market: a CSV file
    try:
        rows = read_csv_rows(name)
    except InputError:
        return 1
    return len(rows[0][1]) if rows else 1


def _read_columns(name: str, n: int, what: str) -> tuple[NDArray[np.float64], tuple[str, ...]]:
    """An (n, m) block of load cases (force units) or solutions (length,
    rotation) from a Matrix Market n x m or a CSV file with m columns, and
    the case names (the CSV header's cells, else ``load-1``...)."""
    names: tuple[str, ...] = ()
    try:
        scipy.io.mminfo(name)
        is_mm = True
    except (OSError, ValueError, TypeError, IndexError):
        is_mm = False
    if is_mm:
        rows_, cols_, entries, fmt, *_ = scipy.io.mminfo(name)
        require_memory_for_entries(name, rows_ * cols_ if fmt == "array" else entries)
        data = scipy.io.mmread(name)
        block = np.asarray(data.toarray() if sp.issparse(data) else data)
        if np.iscomplexobj(block):
            raise InputError(name, f"the {what} file holds complex values")
        block = block.astype(np.float64)
    else:
        rows = read_csv_rows(name)
        m = len(rows[0][1])
        if not all(is_number(c) for c in rows[0][1]):
            names = tuple(c or f"load-{k + 1}" for k, c in enumerate(rows[0][1]))
            if len(set(names)) != m:
                raise InputError(name, f"line {rows[0][0]}: the {what} case names repeat: {', '.join(names)}")
            taken = [c for c in names if RESERVED_SAMPLE_NAME.match(c.strip())]
            if taken:
                raise InputError(name, f"line {rows[0][0]}: the {what} case name {taken[0]!r} is the name of one "
                                       "of the tool's own samples (random-1, random-2, ..., worst-case); "
                                       "rename the case")
            rows = rows[1:]
        values = []
        for line_no, cells in rows:
            if len(cells) != m:
                raise InputError(name, f"line {line_no}: expected {m} values (one per load case), found {len(cells)}")
            values.append([parse_float(name, c, line_no, "value") for c in cells])
        block = np.asarray(values, dtype=np.float64).reshape(-1, m)
    if block.shape[0] != n:
        raise InputError(name, f"the {what} file has {block.shape[0]} rows ({block.shape[1]} load cases) "
                               f"but the matrix has {n} rows")
    bad = np.flatnonzero(~np.isfinite(block).all(axis=1))
    if bad.size:
        first = ", ".join(str(int(k) + 1) for k in bad[:_FIRST_SHOWN])
        raise InputError(name, f"the {what} file has NaN or Inf values in {bad.size} rows (first at rows {first})")
    return block, names or _default_case_names(block.shape[1])


def _require_matching_columns(solution, u, load, f) -> None:
    """One solution column per load case, or an InputError naming the solution file."""
    if u is None or f is None:
        return
    mu, mf = (1 if u.ndim == 1 else u.shape[1]), (1 if f.ndim == 1 else f.shape[1])
    if mu != mf:
        where = str(solution) if _is_path(solution) else ARRAY_SOURCE
        load_where = f" ({load})" if _is_path(load) else ""
        raise InputError(where, f"the solution has {mu} column{'s' if mu != 1 else ''} but the load{load_where} "
                                f"has {mf}: one solution column per load case")


def _restraint_rows(fix, table: Optional[DofTable], n: int, notes: list[str]) -> tuple[NDArray[np.intp], int]:
    """Rows kept after removing the restrained ones, and how many were removed."""
    source = str(fix) if _is_path(fix) else ARRAY_SOURCE
    if table is None:
        raise InputError(source, "restraints name (node, dof) pairs, so they need a DOF map "
                                 "(a dofs file or dofs per node)")
    if _is_path(fix):
        nodes, dofs, lines = _csv_pairs(source)
    else:
        node_arr, dof_arr = _dof_pairs_from_sequence(fix, source)
        nodes, dofs, lines = node_arr.tolist(), dof_arr.tolist(), None
    row_of = {(int(a), int(b)): k for k, (a, b) in enumerate(zip(table.node, table.dof))}
    fixed = set()
    for k, (node, dof) in enumerate(zip(nodes, dofs)):
        row = row_of.get((node, dof))
        if row is None:
            where = f"line {lines[k]}: " if lines is not None else f"entry {k + 1}: "
            raise InputError(source, f"{where}restraint on node {node} {DOF_NAMES[dof]}, "
                                     "which is not in the DOF map")
        fixed.add(row)
    if len(fixed) == n:
        raise InputError(source, f"restraints remove all {n} rows of the matrix")
    keep = np.setdiff1d(np.arange(n, dtype=np.intp), np.fromiter(fixed, dtype=np.intp, count=len(fixed)))
    repeated = len(nodes) - len(fixed)
    notes.append(f"{len(fixed)} restrained dofs from {source} removed (rows and columns of the matrix, "
                 f"entries of the vectors and the DOF map); {keep.size} rows remain"
                 + (f"; {repeated} repeated restraints ignored" if repeated else ""))
    return keep, len(fixed)


def _is_int(cell) -> bool:
    try:
        int(str(cell).strip())
    except ValueError:
        return False
    return True
