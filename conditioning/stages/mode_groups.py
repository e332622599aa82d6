"""Near-singular modes grouped by kind and part: one line each in a report.

    modes  =>  groups (kind, part, exact), each with a count, its motions and nodes

A model can have hundreds of modes of one kind (drilling rotations without
stiffness on a shell, the free nodes of a mass matrix read as a stiffness);
a report prints one line per group and keeps every mode in its data.
"""

from __future__ import annotations

from collections import Counter

import numpy as np

from conditioning.results import ModeGroup, NearSingularMode

#: Distinct axes (or motions) named in a group's line before "and k more".
AXES_SHOWN = 4


def group_modes(modes: list[NearSingularMode]) -> list[ModeGroup]:
    """Group ``modes`` by (kind, part, exact), in the order of each group's first mode.

    DOFs without stiffness that are empty rows (each a part of its own) form
    one group whatever their parts, with part 0 when they are on several.

    Returns
    -------
    list of ModeGroup
        One per group; ``modes`` of each are 1-based positions in ``modes``;
        ``eigenvalue_max`` is dimensionless (scaled eigenvalues).
    """
    keyed: dict[tuple, list[int]] = {}
    for i, m in enumerate(modes):
        # An empty row is a part of its own: all of them make one group (part 0).
        empty_row = m.kind == "dof-without-stiffness" and not m.description
        keyed.setdefault((m.kind, 0 if empty_row else m.part, bool(m.exact), empty_row), []).append(i)
    out = []
    for (kind, part, exact, _), members in keyed.items():
        ms = [modes[i] for i in members]
        if len({m.part for m in ms}) == 1:
            part = ms[0].part
        nodes = sorted({v for m in ms for v in m.nodes})
        out.append(ModeGroup(kind, part, len(ms), exact, _motion_words(ms), nodes,
                             [i + 1 for i in members], float(max(m.eigenvalue for m in ms))))
    return out


def _motion_words(ms: list[NearSingularMode]) -> str:
    """What the group's modes move: their axes or motion names with counts."""
    if len(ms) == 1:
        m = ms[0]
        return m.description or ", ".join(k for k, _ in sorted(m.motion.items(), key=lambda kv: -kv[1]))
    words = Counter(_one_motion(m) for m in ms)
    words.pop("", None)
    shown = [f"{w} x {c}" if c > 1 else w for w, c in words.most_common(AXES_SHOWN)]
    more = len(words) - len(shown)
    return "; ".join(shown) + (f"; and {more} more" if more > 0 else "")


def _one_motion(m: NearSingularMode) -> str:
    if m.axis is not None:
        what = m.description.split(" the axis")[0] if m.description else "about"
        return f"{what} ({', '.join(f'{x:.2f}' for x in np.asarray(m.axis) + 0.0)})"
    if m.motion:
        return max(m.motion, key=m.motion.get)
    return m.description


__all__ = ["group_modes"]
