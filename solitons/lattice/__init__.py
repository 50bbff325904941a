"""The lattice: the grid and its stretched map, difference stencils, field operations on the product of spheres, the preconditioner."""
