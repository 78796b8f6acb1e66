"""Analyses of a Circuit: the hand analysis, the own DC operating-point solver, and what builds on them."""
