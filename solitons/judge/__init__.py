"""Verdicts: the outcome vocabulary and the rules that turn measured evidence into a verdict."""
