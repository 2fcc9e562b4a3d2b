"""Orbit posteriors from past radial velocities."""
