"""The model: term densities (built-in and user terms), the jax reference lattice energy, the Model and its evaluation routes."""
