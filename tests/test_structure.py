"""The package structure: imports run one way (commands -> harness -> kernels), with no cycles,
and no harness module grows past a size one person can read in one sitting."""

from __future__ import annotations

import ast
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
PACKAGES = ("harness", "kernels")
#: Entry points that only hand over to the commands.
ENTRY_POINTS = {"harness.cli", "harness.__main__"}
MAX_HARNESS_LINES = 320


def _module_name(path: Path) -> str:
    parts = list(path.relative_to(ROOT).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def _imports() -> dict[str, set[str]]:
    """Every project module and the project modules it imports (at any depth of the file)."""
    graph: dict[str, set[str]] = {}
    for package in PACKAGES:
        for path in (ROOT / package).rglob("*.py"):
            name = _module_name(path)
            targets = set()
            for node in ast.walk(ast.parse(path.read_text())):
                if isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
                    targets.add(node.module)
                    targets.update(f"{node.module}.{a.name}" for a in node.names)
                elif isinstance(node, ast.Import):
                    targets.update(a.name for a in node.names)
            graph[name] = {t for t in targets if t.split(".")[0] in PACKAGES}
    modules = set(graph)
    return {m: {t for t in ts if t in modules and t != m} for m, ts in graph.items()}


def test_kernels_never_import_harness() -> None:
    bad = {m: sorted(t for t in ts if t.startswith("harness")) for m, ts in _imports().items() if m.startswith("kernels")}
    assert not {m: t for m, t in bad.items() if t}


def test_only_commands_and_entry_points_import_commands() -> None:
    graph = _imports()
    bad = {m: sorted(t for t in ts if t.startswith("harness.commands")) for m, ts in graph.items()
           if m.startswith("harness") and not m.startswith("harness.commands") and m not in ENTRY_POINTS}
    assert not {m: t for m, t in bad.items() if t}


def test_no_import_cycles() -> None:
    graph = _imports()
    # A package importing its own submodules (an __init__ re-exporting them) is not a cycle of modules.
    graph = {m: {t for t in ts if not t.startswith(m + ".")} for m, ts in graph.items()}
    state: dict[str, int] = {}
    cycles: list[list[str]] = []

    def visit(node: str, trail: list[str]) -> None:
        state[node] = 1
        for target in sorted(graph[node]):
            if state.get(target) == 1:
                cycles.append(trail[trail.index(target):] + [target] if target in trail else [node, target])
            elif target not in state:
                visit(target, trail + [target])
        state[node] = 2

    for module in sorted(graph):
        if module not in state:
            visit(module, [module])
    assert not cycles, cycles[:3]


def test_the_checks_above_can_fail() -> None:
    """The graph really holds imports: the commands import the harness, the harness the kernels."""
    graph = _imports()
    assert "harness.sweep" in graph["harness.commands.sweep"] or any(
        t.startswith("harness.") for t in graph["harness.commands.sweep"])
    assert any(t.startswith("kernels") for t in graph["harness.prepare"])


def test_no_harness_module_is_too_long() -> None:
    long = {p.name: n for p in (ROOT / "harness").rglob("*.py") if (n := len(p.read_text().splitlines())) > MAX_HARNESS_LINES}
    assert not long, f"split these modules (over {MAX_HARNESS_LINES} lines): {long}"
