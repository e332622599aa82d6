"""Small text helpers shared by the terminal, HTML and compare views.

Nothing here computes a numerical result; these only turn figures that the
stages already produced into short, honest text.
"""

from __future__ import annotations

import math
from typing import Iterable, Optional

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
    """
    if not method:
        return "estimate"
    low = method.lower()
    for word, tag in _HOW:
        if word in low:
            return tag
    return "estimate"


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
    return f"{value:.1f}"


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
        return (f"Scaling removes {gain_digits:.1f} digits of the raw figure: units or "
                "DOF-type mixing (rotations next to translations, mm next to m), mostly "
                "harmless; the scaled figure is the one that governs the accuracy of the solve.")
    return ("The raw and scaled figures agree within a digit: the conditioning is not an "
            "effect of units or DOF-type mixing.")
