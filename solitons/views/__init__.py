"""Figures and the interactive HTML page."""
