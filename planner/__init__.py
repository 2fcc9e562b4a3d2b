"""Observing-run planning by expected information gain."""
