"""Bundled demo models: a small vectorised FE assembler and invented scenarios.

Everything here is invented data, not a real structure. The models are small
(tens to a few hundred degrees of freedom) so that a full diagnosis runs in
seconds; each one carries the answer a correct diagnosis should reach.

:mod:`conditioning.demo.assemble`
    Element stiffness routines (2D/3D truss, 2D frame, plane-stress quad),
    springs, restraints and load vectors.
:mod:`conditioning.demo.scenarios`
    The named demo cases and their export to Matrix Market and CSV files
    (``python -m conditioning.demo.scenarios matrices/``).
"""

from conditioning.demo.assemble import (
    Assembly,
    apply_restraints,
    combine,
    frame2d,
    ground_spring,
    load_vector,
    plane_stress_quad,
    spring,
    truss2d,
    truss3d,
)

__all__ = [
    "Assembly",
    "apply_restraints",
    "combine",
    "frame2d",
    "ground_spring",
    "load_vector",
    "plane_stress_quad",
    "spring",
    "truss2d",
    "truss3d",
]
