"""Observing-run planning by expected information gain.

The curated public API: the few names a script needs to go from a scenario file to a written,
checked plan. Each is imported from its stage on first use, so ``import planner`` stays cheap
(the command line's ``--version`` and ``--help`` load no astropy or OR-Tools)::

    import planner
    scenario = planner.load("my_run.yaml")            # or None: the bundled demo
    posteriors = planner.fit_posteriors(scenario, ".nightbits-cache")
    run = planner.prepare(scenario, posteriors)
    result = planner.make_plan(run)                   # the joint plan, verified and scored
    print(planner.render_schedule(result.plan_file))

Everything else is public inside its stage package (``planner.sky``, ``planner.information``,
``planner.allocation``, ``planner.workflow``, ``planner.simulation``); see docs/architecture.md.
"""

from importlib import import_module

#: The release, the one place it is written (pyproject.toml reads it from here).
VERSION = "0.1.0"
__version__ = VERSION

#: Public name -> the module that defines it.
_API = {
    "Scenario": "planner.workflow.scenario",
    "load_scenario": "planner.workflow.scenario",
    "load": "planner.workflow.pipeline",
    "fit_posteriors": "planner.workflow.pipeline",
    "prepare": "planner.workflow.pipeline",
    "make_plan": "planner.workflow.pipeline",
    "compare": "planner.workflow.pipeline",
    "PlanResult": "planner.workflow.pipeline",
    "write_plan": "planner.workflow.outputs",
    "read_plan": "planner.workflow.outputs",
    "PlanFile": "planner.workflow.outputs",
    "render_schedule": "planner.workflow.report",
    "PlannerError": "planner.errors",
}

__all__ = ["VERSION", "__version__", *sorted(_API)]


def __getattr__(name: str):
    """Import a public name from its stage on first use (PEP 562)."""
    if name not in _API:
        raise AttributeError(f"module 'planner' has no attribute {name!r}")
    value = getattr(import_module(_API[name]), name)
    globals()[name] = value
    return value


def __dir__():
    return sorted(set(globals()) | set(_API))
