"""Relaxation: initial data and the minimisers with their stopping rule."""
