"""Allocation strategies: joint (CP-SAT), greedy and cadence."""
