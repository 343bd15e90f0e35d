"""The package's layout follows the path the data takes (DEVELOPERS.md, "Layout").

Every module belongs to one stage; a module may import only from its own stage or earlier ones,
so that reading a solution file never loads frame reading, and no import cycle can form. The
stage order below is the one in DEVELOPERS.md. Also: no source module over 600 lines (the
simulator excepted), and ``wavecal --version`` loads no numerical library.
"""
from __future__ import annotations

import ast
import subprocess
import sys
from pathlib import Path

import pytest

import wavecal

PACKAGE = Path(wavecal.__file__).parent

#: Stages in the order the data passes them; a module is matched by its longest listed prefix.
STAGES = (
    ("foundation", ("_version", "_atomic", "_json", "_lazy", "_resources", "_stems", "constants",
                    "errors", "status")),
    ("physics", ("airvac", "optics")),
    ("line lists", ("linelists",)),
    ("profile", ("validation", "header_values", "instrument", "profile")),
    ("nominal model", ("model_setup",)),
    ("frames", ("frame_files", "frames")),
    ("extraction", ("extract",)),
    ("peaks", ("_line_fit", "_line_widths", "_peak_detect", "peak_table", "peaks")),
    ("features", ("features",)),
    ("identification", ("match",)),
    ("fit", ("fit", "refine", "anchors")),
    ("determination", ("determination",)),
    ("verdict", ("verdict",)),
    ("solution", ("slit_shift", "solution_records", "solution", "solution_prior")),
    ("tracing", ("_trace_bands", "tracing")),
    ("calibration", ("assemble", "calibrate")),
    ("products", ("products", "summary_text")),
    ("calibrated frames", ("resample", "wcs_grating", "wcs", "calibrated", "apply")),
    ("reports", ("report",)),
    ("solve and write", ("solve",)),
    ("planning", ("plan",)),
    ("simulation", ("simulate",)),
    ("demo", ("demo",)),
    ("night", ("night",)),
    ("command line", ("cli", "__main__")),
)

MAX_LINES = 600


def _modules() -> dict[str, Path]:
    """Dotted name (without the package) of every module, e.g. ``night.runner``."""
    out = {}
    for path in sorted(PACKAGE.rglob("*.py")):
        parts = list(path.relative_to(PACKAGE).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(parts)] = path
    return out


def _stage(name: str) -> int:
    """Index of the stage of module ``name`` ("" is the package itself: after everything)."""
    if not name:
        return len(STAGES)
    best = None
    for index, (_, prefixes) in enumerate(STAGES):
        for prefix in prefixes:
            if name == prefix or name.startswith(prefix + "."):
                if best is None or len(prefix) > best[1]:
                    best = (index, len(prefix))
    if best is None:
        msg = f"module wavecal.{name} belongs to no stage: add it to STAGES (and DEVELOPERS.md)"
        raise AssertionError(msg)
    return best[0]


def _imports(name: str, path: Path, known: set[str]) -> set[str]:
    """Modules of the package that ``name`` imports anywhere (also inside functions)."""
    package = name.split(".")[:-1] if path.name != "__init__.py" else name.split(".")
    package = [p for p in package if p]
    found = set()
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = package[: len(package) - node.level + 1] if node.level > 1 else package
                target = base + (node.module.split(".") if node.module else [])
            elif node.module and node.module.split(".")[0] == "wavecal":
                target = node.module.split(".")[1:]
            else:
                continue
            candidates = [".".join(target + [alias.name]) for alias in node.names]
            submodules = [c for c in candidates if c in known]  # "from . import x": module x
            found.update(submodules)
            if len(submodules) < len(candidates):
                found.add(".".join(target))
        elif isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name.split(".")[0] == "wavecal":
                    found.add(".".join(alias.name.split(".")[1:]))
    found.discard(name)
    return {m for m in found if m in known or m == ""}


def _stage_name(name: str) -> str:
    return STAGES[_stage(name)][0] if name else "the package"


@pytest.fixture(scope="module")
def graph() -> dict[str, set[str]]:
    modules = _modules()
    known = set(modules)
    return {name: _imports(name, path, known) for name, path in modules.items()}


def test_every_module_imports_only_its_own_stage_or_earlier(graph):
    upward = [f"wavecal.{a} ({_stage_name(a)}) imports wavecal.{b} ({_stage_name(b)})"
              for a, targets in graph.items() for b in targets
              if a and _stage(b) > _stage(a)]
    assert not upward, "\n".join(upward)


def test_no_import_cycle(graph):
    # Tarjan's strongly connected components over the import graph (the package's own
    # __init__, which only names attributes loaded on first use, is left out)
    edges = {a: {b for b in targets if b} for a, targets in graph.items() if a}
    index, low, on_stack, stack, cycles = {}, {}, set(), [], []

    def visit(node):
        index[node] = low[node] = len(index)
        stack.append(node)
        on_stack.add(node)
        for nxt in edges.get(node, ()):
            if nxt not in index:
                visit(nxt)
                low[node] = min(low[node], low[nxt])
            elif nxt in on_stack:
                low[node] = min(low[node], index[nxt])
        if low[node] == index[node]:
            component = []
            while True:
                top = stack.pop()
                on_stack.discard(top)
                component.append(top)
                if top == node:
                    break
            if len(component) > 1:
                cycles.append(sorted(component))

    for node in sorted(edges):
        if node not in index:
            visit(node)
    assert not cycles, cycles


def test_no_source_module_over_600_lines():
    long = {name: n for name, path in _modules().items()
            if not name.startswith("simulate")
            and (n := len(path.read_text(encoding="utf-8").splitlines())) > MAX_LINES}
    assert not long, long


def test_the_stage_checker_sees_an_upward_import():
    # the checker itself: the solution importing the frame reader would be caught
    assert _stage("frames") < _stage("solution") < _stage("calibrate") < _stage("night.runner")
    assert _stage("report.figures") > _stage("products")


def test_version_loads_no_numerical_library():
    code = ("import sys, runpy; sys.argv = ['wavecal', '--version']\n"
            "try:\n    runpy.run_module('wavecal', run_name='__main__')\n"
            "except SystemExit:\n    pass\n"
            "heavy = [m for m in ('numpy', 'scipy', 'astropy', 'pandas', 'lmfit') if m in sys.modules]\n"
            "print('HEAVY', heavy)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert wavecal.__version__ in out.stdout
    assert "HEAVY []" in out.stdout, out.stdout
