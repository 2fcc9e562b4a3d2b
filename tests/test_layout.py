"""The layout: stage subpackages, imports in one direction, no cycles, no private reach-ins.

The import graph is read statically from the AST of every module, imports inside functions
included (an import hidden in a function still couples the two modules); imports under
``if TYPE_CHECKING:`` are left out, since they never run.
"""

import ast
import importlib
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]

#: The stages from the bottom up; a module may import only its own stage and those before it.
#: ``inference``, ``planner.errors`` and ``planner.clock`` are below every planner stage.
STAGES = ("inference", "planner.errors", "planner.clock", "planner.sky", "planner.information",
          "planner.allocation", "planner.workflow", "planner.simulation", "planner.cli")


def _modules():
    mods = {}
    for package in ("inference", "planner"):
        for path in sorted((ROOT / package).rglob("*.py")):
            parts = list(path.relative_to(ROOT).with_suffix("").parts)
            if parts[-1] == "__init__":
                parts = parts[:-1]
            mods[".".join(parts)] = path
    return mods


MODULES = _modules()


def _is_type_checking(node):
    test = node.test
    return (isinstance(test, ast.Name) and test.id == "TYPE_CHECKING") or (
        isinstance(test, ast.Attribute) and test.attr == "TYPE_CHECKING")


def _imports(module):
    """(imported module, imported name or None) for every project import in ``module``."""
    path = MODULES[module]
    tree = ast.parse(path.read_text())
    skip = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.If) and _is_type_checking(node):
            skip.update(id(n) for n in ast.walk(node))
    found = []
    for node in ast.walk(tree):
        if id(node) in skip:
            continue
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = module.split(".")
                if path.name != "__init__.py":
                    base = base[:-1]
                base = base[: len(base) - node.level + 1]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if target.split(".")[0] not in ("inference", "planner"):
                continue
            for alias in node.names:
                sub = f"{target}.{alias.name}"
                found.append((sub, None) if sub in MODULES else (target, alias.name))
        elif isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name.split(".")[0] in ("inference", "planner"):
                    found.append((alias.name, None))
    return found


def _graph(include_packages=False):
    graph = {}
    for module in MODULES:
        if not include_packages and MODULES[module].name == "__init__.py":
            continue
        deps = {target for target, _ in _imports(module)
                if target in MODULES and target != module
                and (include_packages or MODULES[target].name != "__init__.py")}
        graph[module] = deps
    return graph


def _stage(module):
    for rank, stage in enumerate(STAGES):
        if module == stage or module.startswith(stage + "."):
            return rank
    return None


def test_packages_import_and_say_what_they_hold():
    for name in ("inference", "planner", "planner.sky", "planner.information",
                 "planner.allocation", "planner.workflow", "planner.simulation", "planner.cli"):
        package = importlib.import_module(name)
        assert package.__doc__
        for exported in getattr(package, "__all__", ()):
            assert hasattr(package, exported), f"{name}.__all__ names missing {exported!r}"


def test_every_module_sits_in_a_stage():
    loose = [m for m in MODULES if _stage(m) is None
             and m not in ("planner", "planner.__main__")]
    assert not loose, f"modules outside every stage: {loose}"


def _find_cycle(graph):
    """One import cycle of ``graph`` as a list of modules, or None (depth-first search)."""
    colour, stack = {}, []

    def visit(node):
        colour[node] = "grey"
        stack.append(node)
        for dep in sorted(graph.get(node, ())):
            if colour.get(dep) == "grey":
                return stack[stack.index(dep):] + [dep]
            if dep not in colour:
                found = visit(dep)
                if found:
                    return found
        stack.pop()
        colour[node] = "black"
        return None

    for node in sorted(graph):
        if node not in colour:
            found = visit(node)
            if found:
                return found
    return None


def test_no_import_cycle():
    cycle = _find_cycle(_graph())
    assert cycle is None, "import cycle: " + " -> ".join(cycle or ())


def test_cycle_search_finds_a_planted_cycle():
    # The search must be able to fail: slew imports airmass, so a planted edge back closes a loop.
    graph = _graph()
    assert "planner.sky.airmass" in graph["planner.sky.slew"]
    graph["planner.sky.airmass"] = graph["planner.sky.airmass"] | {"planner.sky.slew"}
    cycle = _find_cycle(graph)
    assert cycle and cycle[0] == cycle[-1]


def test_stages_import_only_downwards():
    upward = []
    for module, deps in _graph().items():
        rank = _stage(module)
        if rank is None:
            continue
        for dep in deps:
            if (_stage(dep) or 0) > rank:
                upward.append(f"{module} -> {dep}")
    assert not upward, f"imports from a later stage: {upward}"


def test_no_private_name_imported_from_another_module():
    private = [f"{module} imports {target}.{name}" for module in MODULES
               for target, name in _imports(module)
               if name and name.startswith("_") and target != module]
    private += [f"{module} imports {target}" for module in MODULES
                for target, _ in _imports(module)
                if target.rsplit(".", 1)[-1].startswith("_") and target != "planner.__main__"]
    assert not private, private


def test_developers_guide_places_every_module():
    guide = (ROOT / "DEVELOPERS.md").read_text()
    missing = [m for m in MODULES if MODULES[m].name not in ("__init__.py", "__main__.py")
               and MODULES[m].name not in guide]
    assert not missing, f"modules not in DEVELOPERS.md's layout: {missing}"


def test_curated_api_is_cheap_to_import_and_resolves():
    # `import planner` must not pull in astropy or OR-Tools (the CLI's --help and --version stay
    # fast); each curated name then resolves to its stage's object.
    import subprocess
    import sys

    code = ("import sys, planner; print(sorted(m for m in ('astropy', 'ortools', 'scipy') "
            "if m in sys.modules))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, cwd=ROOT)
    assert out.stdout.strip() == "[]"
    import planner
    from planner.workflow import pipeline, report

    assert planner.make_plan is pipeline.make_plan
    assert planner.render_schedule is report.render_schedule
    assert set(planner.__all__) <= set(dir(planner))
    for name in planner.__all__:
        assert getattr(planner, name) is not None
    with pytest.raises(AttributeError, match="no attribute 'nope'"):
        planner.nope  # noqa: B018


def test_architecture_document_names_every_module():
    # docs/architecture.md holds the contract of every module: each is named there in full.
    text = (ROOT / "docs" / "architecture.md").read_text()
    missing = [m for m in MODULES if MODULES[m].name not in ("__init__.py", "__main__.py")
               and f"`{m}" not in text]
    assert not missing, f"modules without a contract in docs/architecture.md: {missing}"
