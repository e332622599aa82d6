"""Bundled demo models: a small vectorised FE assembler and invented scenarios.

Everything here is invented data, not a real structure. The models are small
(tens to a few hundred degrees of freedom) so that a full diagnosis runs in
seconds; each one carries the answer a correct diagnosis should reach.

:mod:`conditioning.demo.assemble`
    Element stiffness routines (2D/3D truss, 2D/3D frame, plane-stress quad),
    springs, restraints and load vectors.
:mod:`conditioning.demo.scenarios`
    The named demo cases and their export to Matrix Market and CSV files
    (``python -m conditioning.demo.scenarios matrices/``).

``conditioning.demo.scenarios`` is the module; the catalogue function is
``from conditioning.demo.scenarios import scenarios`` (name -> DemoCase).
"""

from __future__ import annotations

import importlib

from conditioning.demo.assemble import (
    Assembly,
    apply_restraints,
    combine,
    frame2d,
    frame3d,
    ground_spring,
    load_vector,
    plane_stress_quad,
    spring,
    truss2d,
    truss3d,
)

_FROM_SCENARIOS = ("DemoCase", "Expected", "export", "export_all")


def __getattr__(name: str):
    # Imported lazily so that ``python -m conditioning.demo.scenarios`` does not
    # find its own module already imported by the package.
    if name in _FROM_SCENARIOS:
        module = importlib.import_module("conditioning.demo.scenarios")
        value = getattr(module, name)
        globals()[name] = value
        return value
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


__all__ = [
    "Assembly",
    "DemoCase",
    "Expected",
    "apply_restraints",
    "combine",
    "export",
    "export_all",
    "frame2d",
    "frame3d",
    "ground_spring",
    "load_vector",
    "plane_stress_quad",
    "spring",
    "truss2d",
    "truss3d",
]
