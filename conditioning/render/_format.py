"""Small text helpers shared by the terminal, HTML and compare views.

Nothing here computes a numerical result; these only turn figures that the
stages already produced into short, honest text.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Iterable, Optional

if TYPE_CHECKING:
    from conditioning import results

#: Words a ``method`` string is classified by, in order of precedence. Every
#: figure in a view is tagged with one of these so the reader knows how it
#: was obtained.
_HOW = (
    ("certified", "certified"),
    ("ball", "certified"),
    ("arbitrary precision", "measured"),
    ("double-double", "measured"),
    ("refinement", "measured"),
    ("measured", "measured"),
    ("lower bound", "bound"),
    ("upper bound", "bound"),
    ("bound", "bound"),
    ("hager", "bound"),
    ("higham", "bound"),
    ("closed form", "exact"),
    ("dense", "computed"),
    ("lapack", "computed"),
)


def how_obtained(method: Optional[str]) -> str:
    """One word for a ``method`` string: certified, measured, bound, computed, exact or estimate.

    ``computed`` is a dense LAPACK figure (accurate to round-off), ``bound``
    a one-sided estimate, ``estimate`` an iterative (Lanczos) figure.

    Examples
    --------
    >>> how_obtained("Hager-Higham 1-norm estimate (a lower bound)")
    'bound'
    >>> how_obtained("Lanczos (eigsh) for lambda_max, shift-and-invert for lambda_min")
    'estimate'
    >>> how_obtained("lambda_max by Lanczos (residual bound 1e-3 relative)")
    'estimate'
    >>> how_obtained("lambda_max by Lanczos, 410 steps: within 0.1% with probability >= 1 - 1e-09 "
    ...              "(Kuczynski-Wozniakowski bound)")
    'estimate'
    """
    if not method:
        return "estimate"
    # "residual bound" is an iterative eigensolver's stopping test, not a
    # one-sided bound on the figure: a Lanczos figure stays an estimate.
    low = method.lower().replace("residual bound", "residual tolerance")
    # Likewise the probabilistic stopping test of a lambda_max run (its length), not a bound on the figure.
    low = low.replace("kuczynski-wozniakowski bound", "kuczynski-wozniakowski run length")
    for word, tag in _HOW:
        if word in low:
            return tag
    return "estimate"


def fmt_mode_eigenvalue(value: float, exact: bool) -> str:
    """A mode's scaled eigenvalue: ``"0 (round-off)"`` when it is zero at
    working precision (below n eps lambda_max(S), where its computed digits
    are round-off that differs between eigensolvers and runs), ``"0"`` for a
    row without stiffness, else the figure.

    Examples
    --------
    >>> fmt_mode_eigenvalue(7.9e-20, True), fmt_mode_eigenvalue(1.84e-13, False)
    ('0 (round-off)', '1.84e-13')
    """
    if exact:
        return "0" if value == 0.0 else "0 (round-off)"
    return fmt_number(value)


def pivots_are_lower_bounds(r: "results.Report") -> bool:
    """True when K has free modes (zero at working precision) besides rows
    without stiffness, which are not factored: the pivots shown (of a shifted
    factorization, or of one whose round-off kept a tiny pivot) then give
    lower bounds of the true losses, which are total along the free modes, so
    a view shows ``>= x`` and never "at most x"."""
    fac = r.factorization
    if fac is not None and fac.shift != 0.0:
        return True
    modes = r.spectrum.modes if r.spectrum is not None else []
    return any(m.exact and m.kind != "dof-without-stiffness" for m in modes)


def summarise_ids(ids: Iterable[int], limit: int = 6) -> str:
    """``"12, 13, 14 and 1,204 more"`` for a long list of node ids or rows.

    Examples
    --------
    >>> summarise_ids(range(1, 1210), limit=3)
    '1, 2, 3 and 1,206 more'
    >>> summarise_ids([4, 7])
    '4, 7'
    >>> summarise_ids([])
    '-'
    """
    ids = [int(i) for i in ids]
    if not ids:
        return "-"
    shown = ", ".join(str(i) for i in ids[:limit])
    rest = len(ids) - limit
    if rest > 0:
        return f"{shown} and {rest:,} more"
    return shown


def fmt_number(value: Optional[float], digits: int = 3) -> str:
    """A figure in engineering-friendly text: ``1.23e+08``, ``4.5``, ``inf``, ``-``.

    ``None`` (a figure that does not exist, e.g. the condition number of a
    singular matrix) is ``"-"``; infinities and NaN are spelled out.
    """
    if value is None:
        return "-"
    value = float(value)
    if math.isnan(value):
        return "nan"
    if math.isinf(value):
        return "inf" if value > 0 else "-inf"
    if value == 0:
        return "0"
    if 1e-3 <= abs(value) < 1e5:
        return f"{value:.{digits}g}"
    return f"{value:.{max(digits - 1, 0)}e}"


def fmt_digits(value: Optional[float]) -> str:
    """Significant figures with one decimal: ``"11.2"``; ``"-"`` when absent."""
    if value is None:
        return "-"
    value = float(value)
    if math.isnan(value):
        return "nan"
    if math.isinf(value):
        return "all" if value > 0 else "none"
    text = f"{value:.1f}"
    return "0.0" if text == "-0.0" else text  # never "-0.0"


def unit_word(report: "results.Report") -> str:
    """``"node"`` with a DOF map, else ``"row"``: without a map the ids are 1-based matrix rows."""
    return "node" if report.summary.nodes is not None else "row"


def total_of(report: "results.Report") -> int:
    """How many nodes (with a DOF map) or rows (without) the model has."""
    s = report.summary
    return int(s.nodes) if s.nodes is not None else int(s.rows)


def ids_phrase(ids: Iterable[int], word: Optional[str], total: Optional[int] = None,
               limit: int = 8, *, bare: bool = False) -> str:
    """``"node 3"``, ``"nodes 5, 6 and 12 more"``, ``"all 42 nodes"``.

    ``word`` is the singular (``"node"`` or ``"row"``); with ``bare`` (or no
    word) the list comes without it, ``"all 42"`` for the whole model.

    Examples
    --------
    >>> ids_phrase([3], "node"), ids_phrase([4, 7], "row"), ids_phrase(range(1, 43), "node", 42)
    ('node 3', 'rows 4, 7', 'all 42 nodes')
    >>> ids_phrase(range(1, 43), "node", 42, bare=True)
    'all 42'
    """
    ids = [int(i) for i in ids]
    if total is not None and total > 2 and len(ids) == total and len(set(ids)) == total:
        return f"all {total:,}" if bare or not word else f"all {total:,} {word}s"
    listed = summarise_ids(ids, limit)
    if bare or not word:
        return listed
    return f"{word}{'' if len(ids) == 1 else 's'} {listed}"


def rows_phrase(rows: Iterable[int], limit: int = 8) -> str:
    """0-based matrix rows as the 1-based text the reader sees: ``"row 4"``, ``"rows 4, 9"``."""
    return ids_phrase([int(r) + 1 for r in rows], "row", None, limit)


def fmt_motion(motion: dict[str, float], threshold: float = 0.01) -> str:
    """``"ux 71%, rz 29%"``: motion shares above ``threshold``, largest first."""
    parts = sorted(((share, name) for name, share in motion.items() if share >= threshold),
                   reverse=True)
    if not parts:
        return "-"
    return ", ".join(f"{name} {share:.0%}" for share, name in parts)


def scaling_sentence(gain_digits: float) -> str:
    """What the difference between the raw and the scaled condition number means.

    ``gain_digits`` is log10(raw / scaled) as the condition stage reports it.
    """
    if gain_digits >= 1.0:
        return (f"Scaling removes {gain_digits:.1f} digits of the raw figure: rows of very "
                "different size (units or DOF-type mixing: rotations next to translations, mm next "
                "to m; or stiff material next to soft), mostly harmless; the scaled figure is the "
                "one that governs the accuracy of the solve.")
    return ("The raw and scaled figures agree within a digit: the conditioning is not an "
            "effect of units, DOF-type mixing or materials of different stiffness.")


def zero_diagonal_text(st: results.StructureResult, max_ids: int = 8) -> str:
    """Every zero diagonal, by kind: a row with no entry at all has one too."""
    empty, coupled = len(st.empty_rows), len(st.zero_diagonal)
    if not empty and not coupled:
        return "none"
    with_coupling = (f"{coupled:,} in rows with coupling terms "
                     f"({rows_phrase(st.zero_diagonal, max_ids)})")
    if not coupled:
        return f"{empty:,}, all in the DOFs without stiffness (no coupling terms either)"
    if not empty:
        return with_coupling
    return f"{empty + coupled:,}: {empty:,} in the DOFs without stiffness, {with_coupling}"


#: How a negative-pivot count is obtained when the elimination pivoted on the
#: diagonal only: the signs of the pivots of K = L D L^T, which by Sylvester's
#: law of inertia are the signs of K's eigenvalues (common practice).
NEGATIVE_PIVOTS_HOW = "pivot signs (Sylvester)"


def mode_count_lines(sp: results.SpectrumResult, jumps_shown: bool) -> list[str]:
    """The mode count, what lies below the split and the inertia cross-check,
    worded so that each count says what it counts (a stiff-link eigenvalue is
    below the split but is no mode; a DOF without stiffness is a mode outside S)."""
    # A row without stiffness is left out of S (its mode has no description);
    # a direction without stiffness at a single node is an eigenvalue of S.
    empty = sum(1 for m in sp.modes if m.kind == "dof-without-stiffness" and not m.description)
    at_nodes = sum(1 for m in sp.modes if m.kind == "dof-without-stiffness" and m.description)
    head = f"{sp.count} near-singular mode{'s' if sp.count != 1 else ''}"
    if empty:
        head += (f", {empty} of them DOF(s) without stiffness (each a mode of its own, "
                 "outside the eigenvalues of S)")
    if at_nodes:
        head += (f", {at_nodes} of them {'a direction' if at_nodes == 1 else 'directions'} without "
                 "stiffness at single nodes")
    lines = [head]
    links = len(sp.stiff_link_eigenvalues)
    below = sp.below_split
    only_modes = below is not None and below == sp.count - empty and not links
    if below is not None and sp.gap is not None and not only_modes:
        parts = [f"{sp.count - empty} near-singular mode(s)"] if sp.count > empty else []
        if links:
            parts.append(f"{links} from stiff links, not a missing support"
                         + (" (see the stiffness jumps)" if jumps_shown else ""))
        if sp.negative_eigenvalues:
            parts.append(f"{sp.negative_eigenvalues} negative")
        rest = below - (sp.count - empty) - links - sp.negative_eigenvalues
        if rest:
            parts.append(f"{rest} not classified")
        lines.append(f"{below} eigenvalue(s) of S below a gap of {fmt_number(sp.gap)}: "
                     + ", ".join(parts))
    elif sp.gap is not None:
        lines[0] += f", separated by a gap of {fmt_number(sp.gap)}"
    if sp.inertia_count is not None:
        agree = {True: "agrees", False: "DISAGREES", None: "not compared"}[sp.inertia_agrees]
        against = f" with the {below} computed" if below is not None and sp.inertia_agrees is not None else ""
        lines.append(f"inertia count of the eigenvalues of S below the gap (negative pivots, "
                     f"Sylvester's law): {sp.inertia_count}, {agree}{against}")
    return lines


def confirmed(sample: "results.DigitsSample") -> bool:
    """True when the sample's reference is the independent re-solve (its method
    is then "certified" or "arbitrary precision"), not refinement alone."""
    return sample.method in ("certified (ball arithmetic)", "arbitrary precision")
