"""The package's layout: a folder per stage, imports one way, no cycle, the map in DEVELOPERS.md
complete, the output registry the one place an output column is defined.

Facts of this project's design (``DEVELOPERS.md``), no outside source: common practice, no source.
"""

from __future__ import annotations

import ast
import importlib
import re
from pathlib import Path

import pytest
import tomllib

import wallstress
from wallstress.schema.outputs import BY_OUTPUT, OUTPUT_COLUMNS, OUTPUTS
from wallstress.schema.vocabulary import OUT

ROOT = Path(__file__).resolve().parents[1]
PACKAGE = ROOT / "wallstress"

# Stages in the order data flows; a module may import its own stage, a shared piece, or a stage of
# a lower rank.
RANK = {
    "formulas": 0,
    "schema": 1,
    "read": 2,
    "prepare": 2,
    "analysis": 3,
    "write": 4,
    "tracking": 4,
    "calibration": 4,
    "figures": 5,
    "report": 5,
    "jobs": 6,
    "chunked": 6,
    "follow_up": 6,
    "cohort": 4,
    "cli": 7,
    "cli_cohort": 7,
    "cli_common": 7,
    "web": 7,
}
SHARED = {"errors", "options", "findings", "progress", "bundled", "__init__"}


def _modules() -> dict[str, Path]:
    out = {}
    for f in sorted(PACKAGE.rglob("*.py")):
        parts = list(f.relative_to(ROOT).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(parts)] = f
    return out


MODULES = _modules()


def _stage(module: str) -> str:
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else "__init__"


def _imports(path: Path) -> set[str]:
    """The wallstress modules a file imports, at the top or inside functions."""
    found = set()
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            if not node.module.startswith("wallstress"):
                continue
            for alias in node.names:
                sub = f"{node.module}.{alias.name}"
                found.add(sub if sub in MODULES else node.module)
        elif isinstance(node, ast.Import):
            found |= {a.name for a in node.names if a.name.startswith("wallstress")}
    return found & set(MODULES)


GRAPH = {m: _imports(p) - {m} for m, p in MODULES.items()}


def test_every_stage_has_a_rank_and_no_stray_modules_at_the_top():
    """At most about 12 modules directly in wallstress/ (the shared pieces and the top layer)."""
    top = [p for p in PACKAGE.glob("*.py")]
    assert len(top) <= 12, sorted(p.name for p in top)
    for m in MODULES:
        stage = _stage(m)
        assert stage in RANK or stage in SHARED, f"{m}: stage {stage!r} has no place in RANK"


def test_imports_point_one_way():
    wrong = []
    for m, targets in GRAPH.items():
        s = _stage(m)
        for t in targets:
            ts = _stage(t)
            if ts in SHARED or ts == s or t == "wallstress":
                continue
            if s in SHARED:
                wrong.append(f"{m} (shared) imports {t}")
            elif RANK[ts] > RANK[s]:
                wrong.append(f"{m} ({s}) imports {t} ({ts}), a stage above it")
    assert not wrong, "\n".join(wrong)


def test_no_import_cycle():
    """Tarjan's strongly connected components (Tarjan RE, SIAM J Comput 1972;1:146)."""
    index, low, on_stack, stack, cycles = {}, {}, set(), [], []
    counter = [0]

    def visit(v):
        index[v] = low[v] = counter[0]
        counter[0] += 1
        stack.append(v)
        on_stack.add(v)
        for w in GRAPH[v]:
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on_stack.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                cycles.append(sorted(comp))

    for v in GRAPH:
        if v not in index:
            visit(v)
    assert not cycles, cycles


def test_no_module_over_500_lines():
    long = {m: n for m, p in MODULES.items() if (n := len(p.read_text().splitlines())) > 500}
    assert not long, long


def test_imports_name_the_defining_module():
    """Every function or class imported ``from wallstress.x`` is defined in ``x``: no module passes
    on another's names (the formulas package's namespace excepted)."""
    passed_on = []
    for m, p in MODULES.items():
        for node in ast.walk(ast.parse(p.read_text())):
            if not (isinstance(node, ast.ImportFrom) and node.level == 0 and node.module):
                continue
            if not node.module.startswith("wallstress") or node.module == "wallstress.formulas":
                continue
            source = importlib.import_module(node.module)
            for alias in node.names:
                obj = getattr(source, alias.name, None)
                home = (
                    getattr(obj, "__module__", None)
                    if isinstance(obj, type) or callable(obj)
                    else None
                )
                if home and home.startswith("wallstress") and home != node.module:
                    if node.module == "wallstress" and alias.name in wallstress.__all__:
                        continue  # the lazy public API
                    passed_on.append(f"{m}: {alias.name} from {node.module}, defined in {home}")
    assert not passed_on, "\n".join(passed_on)


def test_developers_map_lists_every_module():
    text = (ROOT / "DEVELOPERS.md").read_text()
    listed = set(re.findall(r"`(wallstress/[\w/]+\.py)`", text))
    present = {p.relative_to(ROOT).as_posix() for p in MODULES.values()}
    assert present - listed == set(), f"add to the map in DEVELOPERS.md: {sorted(present - listed)}"
    assert listed - present == set(), f"in DEVELOPERS.md but gone: {sorted(listed - present)}"


def test_pyproject_lists_every_package():
    """A package missing from pyproject's list would be missing from the wheel."""
    config = tomllib.loads((ROOT / "pyproject.toml").read_text())
    listed = set(config["tool"]["setuptools"]["packages"])
    packages = {m for m, p in MODULES.items() if p.name == "__init__.py"}
    assert packages <= listed, sorted(packages - listed)


@pytest.mark.parametrize("output", OUTPUTS, ids=[o.name for o in OUTPUTS])
def test_registry_formula_is_one_hop_away(output):
    """Each output names the function that computes it; the name resolves to a callable."""
    module, _, name = f"wallstress.{output.formula}".rpartition(".")
    assert callable(getattr(importlib.import_module(module), name))
    for field in output.inputs:
        assert field in wallstress.schema.fields.BY_NAME, (output.name, field)
    for method in output.methods.values():
        assert method.source and method.equation
        assert method.verified in ("published", "from_memory"), method


def test_registry_methods_cover_the_option_choices():
    from wallstress.schema.vocabulary import METHOD_CHOICES

    for o in OUTPUTS:
        if o.option:
            assert set(METHOD_CHOICES[o.option]) <= set(o.methods), o.name


def test_output_names_written_only_in_the_registry_and_where_computed():
    """Elsewhere an output column is named through ``OUT`` (checked when used)."""
    allowed = {PACKAGE / "schema" / "outputs.py", PACKAGE / "analysis" / "measures.py"}
    names = set(OUTPUT_COLUMNS)
    found = []
    for p in MODULES.values():
        if p in allowed or p.parent.name == "formulas":
            continue
        for node in ast.walk(ast.parse(p.read_text())):
            if isinstance(node, ast.Constant) and node.value in names:
                found.append(f"{p.relative_to(ROOT)}:{node.lineno}: {node.value!r}")
    assert not found, "\n".join(found)


def test_out_names_output_columns_and_refuses_others():
    assert OUT.lv_mass_g == "lv_mass_g"
    assert set(dir(OUT)) == set(BY_OUTPUT)
    with pytest.raises(AttributeError, match="not an output column"):
        _ = OUT.lv_mass_kg
