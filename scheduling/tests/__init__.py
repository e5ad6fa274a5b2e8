"""Tests of the pure scheduling computations."""
