"""Measurements, arrays in and numbers out: Hopf charge, curves and knots, symmetry, Hessian modes, extrapolation."""
