"""Stage 5, simulation: executing plans against true orbits and measuring what was learnt.

Takes a prepared run, true orbits and a weather model; gives synthetic velocities, refitted
posteriors, realised bits per star and per strategy, and experiments over seeds. Imports the
stages below it.
"""

from planner.simulation.experiment import build_setup, run_experiment
from planner.simulation.scoreboard import summarise
from planner.simulation.simulate import execute
from planner.simulation.truth import TrueOrbit, read_truths
from planner.simulation.weather import Weather, draw_weather

__all__ = [
    "build_setup",
    "draw_weather",
    "execute",
    "read_truths",
    "run_experiment",
    "summarise",
    "TrueOrbit",
    "Weather",
]
