"""The bundled, invented demo run (scenario, past velocities and true orbits)."""
