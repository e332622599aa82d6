"""Kernels that know no model: extended-precision arithmetic, refinement,
reference solves, rigid-motion bases."""
