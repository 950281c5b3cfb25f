"""The import graph follows the layers DEVELOPERS.md draws, and has no cycles.

cli -> engine stages -> parts -> nothing of ours (errors and checks are shared by all). Each
stage is one folder; a stage imports only the stages before it in ``STAGES`` (a plan is
made before it is filled, and reported after). The check reads the source with :mod:`ast`, so it
sees imports inside functions too.
"""

from __future__ import annotations

import ast
from pathlib import Path

import imputelab

PACKAGE = Path(imputelab.__file__).parent
# The engine's stages, in the order they may import one another (earlier ones only).
STAGES = ("survey", "score", "fill", "report", "bench")
PARTS = {"io", "frame", "masks", "methods", "metrics", "executors"}
LAYER = {"errors": 0, "part": 1, "engine": 2, "cli": 3, "api": 4}


def module_name(path: Path) -> str:
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def layer_of(module: str) -> str:
    parts = module.split(".")
    if len(parts) == 1:
        return "api"  # imputelab/__init__.py re-exports the public names
    head = parts[1]
    if head in ("errors", "checks"):  # exceptions and parameter checks
        return "errors"
    if head in ("cli", "__main__"):
        return "cli"
    if head in STAGES:
        return "engine"
    assert head in PARTS, f"{module}: a new top-level module or folder belongs in STAGES or PARTS"
    return "part"


def imports_of(path: Path) -> set[str]:
    found = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            names = [node.module] + [f"{node.module}.{a.name}" for a in node.names]
        elif isinstance(node, ast.Import):
            names = [a.name for a in node.names]
        else:
            continue
        for name in names:
            if name.split(".")[0] == "imputelab":
                found.add(name)
    return found


def graph() -> dict[str, set[str]]:
    modules = {module_name(p): p for p in PACKAGE.rglob("*.py")}
    edges = {}
    for name, path in modules.items():
        targets = set()
        for imported in imports_of(path):
            # "from imputelab.masks import get_mask" names a module or a symbol: keep the
            # longest prefix that is one of our modules.
            while imported not in modules and "." in imported:
                imported = imported.rsplit(".", 1)[0]
            if imported in modules and imported != name:
                targets.add(imported)
        edges[name] = targets
    return edges


def test_no_module_imports_a_higher_layer():
    upward = []
    for name, targets in graph().items():
        for target in targets:
            if LAYER[layer_of(target)] > LAYER[layer_of(name)]:
                upward.append(f"{name} ({layer_of(name)}) imports {target} ({layer_of(target)})")
    assert not upward, "\n".join(sorted(upward))


def stage_of(module: str) -> str | None:
    head = module.split(".")[1] if "." in module else ""
    return head if head in STAGES else None


def test_a_stage_imports_only_earlier_stages():
    wrong = []
    for name, targets in graph().items():
        mine = stage_of(name)
        for target in targets:
            theirs = stage_of(target)
            if mine and theirs and STAGES.index(theirs) > STAGES.index(mine):
                wrong.append(f"{name} ({mine}) imports {target} ({theirs})")
    assert not wrong, "\n".join(sorted(wrong))


def test_no_private_module_is_imported_from_another_folder():
    # Private helpers live beside the code that uses them.
    crossing = []
    for name, targets in graph().items():
        for target in targets:
            private = target.rsplit(".", 1)[-1].startswith("_")
            elsewhere = target.rsplit(".", 1)[0] != name.rsplit(".", 1)[0]
            if private and elsewhere and not target.endswith("__init__"):
                crossing.append(f"{name} imports {target}")
    assert not crossing, "\n".join(sorted(crossing))


def test_top_level_holds_only_the_api_errors_checks_and_folders():
    loose = sorted(p.stem for p in PACKAGE.glob("*.py"))
    assert loose == ["__init__", "__main__", "checks", "errors"]


def test_parts_import_only_errors_and_other_parts():
    for name, targets in graph().items():
        if layer_of(name) == "part":
            assert all(layer_of(t) in ("errors", "part") for t in targets), name


def test_the_import_graph_has_no_cycle():
    edges = graph()
    # A package's __init__ importing its own submodules is the registry pattern, not a cycle.
    own = {n: {t for t in ts if not t.startswith(n + ".")} for n, ts in edges.items()}
    state: dict[str, int] = {}
    cycles = []

    def visit(node: str, stack: list[str]) -> None:
        state[node] = 1
        for nxt in sorted(own[node]):
            if state.get(nxt) == 1:
                cycles.append(" -> ".join([*stack[stack.index(nxt):], nxt]))
            elif nxt not in state:
                visit(nxt, [*stack, nxt])
        state[node] = 2

    for node in sorted(own):
        if node not in state:
            visit(node, [node])
    assert not cycles, "\n".join(cycles)


def test_the_checker_sees_an_upward_import(tmp_path):
    # The checker itself must be able to fail: a part importing the engine is caught.
    fake = tmp_path / "mod.py"
    fake.write_text("from imputelab.score.build import score_table\n", encoding="utf-8")
    assert imports_of(fake) == {"imputelab.score.build", "imputelab.score.build.score_table"}
    assert LAYER[layer_of("imputelab.score.build")] > LAYER[layer_of("imputelab.metrics.scores")]


def third_party_imports(path: Path) -> set[str]:
    found = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            found.add(node.module.split(".")[0])
        elif isinstance(node, ast.Import):
            found.update(a.name.split(".")[0] for a in node.names)
    return found


def test_plotting_lives_only_in_the_charts_part():
    # charts holds pure figure builders; the report and the bench draw through it, so
    # matplotlib is imported nowhere else.
    users = sorted(module_name(p) for p in PACKAGE.rglob("*.py")
                   if "matplotlib" in third_party_imports(p))
    assert users == ["imputelab.report.charts"]
