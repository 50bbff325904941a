"""The axial (half-plane) model and its run."""
