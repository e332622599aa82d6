"""Reading the engineer's files: the matrix, the DOF map, coordinates, vectors."""
