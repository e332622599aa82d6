"""Localised bases of a near-null space: per-group zero directions and the sparsest rotation.

    S (n, n), group of each row  =>  directions z with S z ~ 0 living on one group's rows
    V (n, m), span of a null space  =>  C = V V[R]^-1, columns with local supports

An eigensolver returns an arbitrary orthonormal basis of a repeated (zero)
eigenvalue's space, so a hundred independent local zero-energy motions come
back as a hundred vectors each spread over hundreds of nodes. Two kernels
undo that mixing without any model knowledge (a "group" is any label per
row, in practice the node):

- :func:`group_null_directions`: the zero directions of each group's own
  diagonal block that have no coupling to the other rows. For a positive
  semi-definite S, z'S_gg z = 0 already implies S z = 0 (the coupling is
  checked anyway, for indefinite input).
- :func:`sparsest_basis`: the basis of span(V) that is the identity on r
  pivot rows chosen by column-pivoted QR of V^T (Businger and Golub [1]_;
  LAPACK xGEQP3 behind scipy.linalg.qr). When span(V) is spanned by motions
  with disjoint supports, each column of the result is one of them.

References
----------
.. [1] P. Businger, G. H. Golub (1965), "Linear least squares solutions by
       Householder transformations", Numer. Math. 7, pp. 269-276 (QR with
       column pivoting; from memory).
.. [2] T. F. Coleman, A. Pothen (1986), "The null space problem I.
       Complexity", SIAM J. Alg. Disc. Meth. 7, pp. 527-537 (sparse null-space
       bases; from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg as la
import scipy.sparse as sp
from numpy.typing import NDArray

from conditioning.linalg.floating_point import EPS


@dataclass(frozen=True)
class GroupNullDirections:
    """Zero directions of diagonal blocks, one column per direction.

    Attributes
    ----------
    group : (k,) int
        Group label of each direction.
    Z : (n, k) float64
        Unit 2-norm directions, each nonzero on its group's rows only
        (same coordinates as the matrix given).
    eigenvalue : (k,) float64
        z' S z of each direction (the matrix's units).
    """

    group: NDArray[np.intp]
    Z: NDArray[np.float64]
    eigenvalue: NDArray[np.float64]


def group_null_directions(S: sp.sparray, group: NDArray[np.intp], candidates: NDArray[np.intp],
                          tol: float) -> GroupNullDirections:
    """Directions of each candidate group's diagonal block with z'S z <= tol and ||S z|| <= sqrt(tol ||S||).

    Parameters
    ----------
    S : (n, n) sparse, symmetric
        The matrix (scaled stiffness in practice; dimensionless).
    group : (n,) int
        Group label of each row (e.g. the index of its node); rows labelled
        -1 are never used.
    candidates : (g,) int
        Labels of the groups to look at.
    tol : float
        Largest z'S z of a zero direction (S's units).

    Returns
    -------
    GroupNullDirections
        The directions found, candidates in the order given; within a block,
        an orthonormal basis of the block's eigenvectors below ``tol``.

    Notes
    -----
    Blocks of equal size are solved together (batched LAPACK xSYEVD through
    numpy.linalg.eigh), so the cost is linear in the number of candidates.
    The coupling bound follows from ||S z||^2 <= ||S|| z'Sz for S positive
    semi-definite; a direction that violates it is dropped.
    """
    S = sp.csr_array(S)
    n = S.shape[0]
    rows_of = {int(g): np.flatnonzero(group == g) for g in candidates}
    norm_S = float(abs(S).sum(axis=0).max()) if S.nnz else 0.0
    found_g, found_z, found_lam = [], [], []
    by_size: dict[int, list[int]] = {}
    for g, rows in rows_of.items():
        if rows.size:
            by_size.setdefault(rows.size, []).append(g)
    for size, gs in by_size.items():
        idx = np.array([rows_of[g] for g in gs])                       # (b, size)
        blocks = np.stack([S[r][:, r].toarray() for r in idx])          # (b, size, size)
        lam, vec = np.linalg.eigh((blocks + blocks.transpose(0, 2, 1)) / 2)
        for b, j in zip(*np.nonzero(lam <= tol)):
            z = np.zeros(n)
            z[idx[b]] = vec[b, :, j]
            if np.linalg.norm(S @ z) <= np.sqrt(max(tol, 0.0) * norm_S) + EPS * norm_S:
                found_g.append(gs[b])
                found_z.append(z)
                found_lam.append(float(lam[b, j]))
    Z = np.column_stack(found_z) if found_z else np.zeros((n, 0))
    return GroupNullDirections(np.array(found_g, dtype=np.intp), Z, np.array(found_lam))


def sparsest_basis(V: NDArray[np.float64], rtol: float = 1e-10) -> NDArray[np.float64]:
    """A basis of span(V) with local supports: C = V V[R]^-1, columns scaled to unit max-norm.

    Parameters
    ----------
    V : (n, m) float64
        Columns spanning the space (orthonormal or not; dependent columns
        are dropped at ``rtol``).
    rtol : float
        Entries of C below ``rtol`` times the column's largest are set to
        zero (round-off of the solve; the project's choice).

    Returns
    -------
    (n, r) float64
        r = numerical rank of V (dimensionless, V's coordinates); column k
        is nonzero at pivot row R_k and 0 at the other pivot rows, ordered
        as the pivots were chosen (largest rows first).

    Notes
    -----
    R holds the first r pivots of the column-pivoted QR of V^T [1]_, the
    same subset selection the restraint advice uses: V[R] is then as well
    conditioned as a greedy choice can make it. If span(V) = span(M) with
    the columns of M supported on disjoint row sets, every pivot falls in a
    different support (else V[R] would be singular) and C = M M[R]^-1 is M
    with its columns rescaled: the local motions are recovered exactly.

    Examples
    --------
    Two local motions on rows {0, 1} and {2, 3}, mixed by a rotation:

    >>> import numpy as np
    >>> M = np.array([[1., 0], [1, 0], [0, 1], [0, -1]])
    >>> C = sparsest_basis(M @ np.array([[0.6, 0.8], [-0.8, 0.6]]))
    >>> np.abs(C[:, np.argsort(np.abs(C[0]))[::-1]]).round(12)
    array([[1., 0.],
           [1., 0.],
           [0., 1.],
           [0., 1.]])
    """
    V = np.asarray(V, dtype=np.float64)
    if V.shape[1] == 0:
        return V
    Q = la.orth(V)
    r = Q.shape[1]
    _, _, piv = la.qr(Q.T, mode="economic", pivoting=True)
    C = la.solve(Q[piv[:r]].T, Q.T).T
    C /= np.max(np.abs(C), axis=0)
    C[np.abs(C) < rtol] = 0.0
    return C


__all__ = ["GroupNullDirections", "group_null_directions", "sparsest_basis"]
