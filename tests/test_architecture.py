"""The inside's rules, read from the source with the standard library's own parser (ast).

- No module imports another module's private (``_name``) names.
- Layers point one way: ``kinset.io`` imports nothing from ``fitting``, ``matching`` or
  ``report``; physics opens no file and imports no other room.
- The dataset names are written as a literal list in one place (``kinset.registry``).
- No source function is longer than 80 lines of code (blank lines, comments and
  docstrings not counted); the report's page template is a string constant, not a function.
- The Celsius offset and the SI prefix table are defined once (``kinset.si``).
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest
import scipy.constants

import kinset
from kinset import registry, si

SRC = Path(kinset.__file__).parent
MODULES = sorted(SRC.rglob("*.py"))
MAX_FUNCTION_LINES = 80


def _module_name(path: Path) -> str:
    parts = path.relative_to(SRC.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _tree(path: Path) -> ast.Module:
    return ast.parse(path.read_text(encoding="utf-8"), filename=str(path))


def _absolute(node: ast.ImportFrom, module: str, is_package: bool) -> str:
    if not node.level:
        return node.module or ""
    base = module.split(".") if is_package else module.split(".")[:-1]
    base = base[: len(base) - (node.level - 1)]
    return ".".join(base + ([node.module] if node.module else []))


def _imports(path: Path) -> list[tuple[str, str, int]]:
    """(imported module, imported name or '', line) of every import in ``path``."""
    module = _module_name(path)
    out = []
    for node in ast.walk(_tree(path)):
        if isinstance(node, ast.Import):
            out += [(a.name, "", node.lineno) for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            source = _absolute(node, module, path.name == "__init__.py")
            out += [(source, a.name, node.lineno) for a in node.names]
    return out


def test_the_rules_see_every_module():
    # the checks below would pass vacuously on an empty list
    names = {_module_name(p) for p in MODULES}
    assert {"kinset.io.reel", "kinset.matching.run", "kinset.report.html",
            "kinset.fitting.forward", "kinset.registry"} <= names


def test_no_module_imports_a_private_name_of_another():
    found = []
    for path in MODULES:
        for source, name, line in _imports(path):
            if name.startswith("_") and not name.startswith("__"):
                found.append(f"{path.relative_to(SRC)}:{line} imports {name} from {source}")
        # attribute access to a private name of an imported kinset module: qty._x
        aliases = {a.asname or a.name.split(".")[-1]
                   for node in ast.walk(_tree(path)) if isinstance(node, (ast.Import, ast.ImportFrom))
                   for a in node.names
                   if (isinstance(node, ast.Import) and a.name.startswith("kinset"))
                   or (isinstance(node, ast.ImportFrom) and (node.module or "").startswith("kinset"))}
        for node in ast.walk(_tree(path)):
            if isinstance(node, ast.Attribute) and isinstance(node.value, ast.Name) \
                    and node.value.id in aliases and node.attr.startswith("_") \
                    and not node.attr.startswith("__"):
                found.append(f"{path.relative_to(SRC)}:{node.lineno} uses {node.value.id}.{node.attr}")
    assert not found, "\n".join(found)


def test_the_check_for_private_imports_can_fail(tmp_path):
    bad = tmp_path / "kinset" / "bad.py"
    bad.parent.mkdir()
    bad.write_text("from kinset.matching.criteria import _accuracy_bound\n", encoding="utf-8")
    global SRC
    saved, SRC = SRC, tmp_path / "kinset"
    try:
        assert [n for _, n, _ in _imports(bad)] == ["_accuracy_bound"]
    finally:
        SRC = saved


@pytest.mark.parametrize("room,forbidden", [
    ("io", ("kinset.fitting", "kinset.matching", "kinset.report", "kinset.extract",
            "kinset.quantities")),
    ("physics", ("kinset.io", "kinset.fitting", "kinset.matching", "kinset.report")),
    ("fitting", ("kinset.io", "kinset.matching", "kinset.report")),
    ("matching", ("kinset.report", "kinset.fitting", "kinset.extract")),
])
def test_layers_point_one_way(room, forbidden):
    found = [f"{p.relative_to(SRC)}:{line} imports {source}"
             for p in sorted((SRC / room).rglob("*.py"))
             for source, _name, line in _imports(p)
             if source.startswith(forbidden)]
    assert not found, "\n".join(found)


def _collections_with_dataset_names(path: Path) -> list[int]:
    names = set(registry.NAMES)
    lines = []
    for node in ast.walk(_tree(path)):
        # three or more dataset names in one literal is a list of datasets (two can be
        # columns of a table that happen to share a dataset's name)
        if isinstance(node, (ast.Tuple, ast.List, ast.Set)):
            words = {e.value for e in node.elts if isinstance(e, ast.Constant)}
            if len(words & names) >= 3:
                lines.append(node.lineno)
        elif isinstance(node, ast.Dict):
            words = {k.value for k in node.keys if isinstance(k, ast.Constant)}
            if len(words & names) >= 3:
                lines.append(node.lineno)
        elif isinstance(node, ast.Constant) and isinstance(node.value, str) \
                and sum(n in node.value.split("|") for n in names) >= 2:
            lines.append(node.lineno)     # "forward|leakage|..." patterns
    return lines


def test_dataset_names_are_listed_in_one_place():
    where = {str(p.relative_to(SRC)): lines for p in MODULES
             if (lines := _collections_with_dataset_names(p))}
    assert not where, where
    # the one place: the registry's records, whose names every room iterates over
    assert registry.NAMES == ("forward", "leakage", "capacitance", "recovery")
    registry_source = (SRC / "registry.py").read_text(encoding="utf-8")
    assert all(registry_source.count(f'Dataset("{n}"') == 1 for n in registry.NAMES)
    # and the workflow takes its wildcard from the registry, not a pattern of its own
    snakefile = (SRC.parent.parent / "Snakefile")
    if snakefile.is_file():
        text = snakefile.read_text(encoding="utf-8") + "".join(
            p.read_text(encoding="utf-8") for p in (SRC.parent.parent / "rules").glob("*.smk"))
        assert "forward|" not in text and '"forward", "leakage"' not in text


def _code_lines(lines: list[str], node: ast.AST) -> int:
    body = getattr(node, "body", [])
    doc = set()
    if body and isinstance(body[0], ast.Expr) and isinstance(body[0].value, ast.Constant) \
            and isinstance(body[0].value.value, str):
        doc = set(range(body[0].lineno, body[0].end_lineno + 1))
    return sum(1 for ln in range(node.lineno, node.end_lineno + 1)
               if ln not in doc and lines[ln - 1].strip()
               and not lines[ln - 1].strip().startswith("#"))


def test_no_function_is_longer_than_80_lines_of_code():
    long = []
    for path in MODULES:
        lines = path.read_text(encoding="utf-8").splitlines()
        for node in ast.walk(_tree(path)):
            if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
                n = _code_lines(lines, node)
                if n > MAX_FUNCTION_LINES:
                    long.append(f"{path.relative_to(SRC)}:{node.lineno} {node.name}: {n} lines")
    assert not long, "\n".join(long)


def test_celsius_offset_and_si_prefixes_are_defined_once():
    # scipy.constants (CODATA, from the registry) as the outside reference for the offset
    assert si.ZERO_CELSIUS == scipy.constants.zero_Celsius
    # BIPM SI Brochure, 9th edition, Table 7: the prefixes kinset reads
    assert si.PREFIXES["k"] == scipy.constants.kilo and si.PREFIXES["f"] == scipy.constants.femto
    assert si.PREFIXES["u"] == si.PREFIXES["\u00b5"] == scipy.constants.micro
    found = []
    for path in MODULES:
        if path.name == "si.py":
            continue
        for node in ast.walk(_tree(path)):
            if isinstance(node, ast.Constant) and node.value == 273.15:
                found.append(f"{path.relative_to(SRC)}:{node.lineno} writes 273.15")
            if isinstance(node, ast.Dict):
                keys = {k.value for k in node.keys if isinstance(k, ast.Constant)}
                if {"m", "n", "p"} <= keys:
                    found.append(f"{path.relative_to(SRC)}:{node.lineno} has a prefix table")
    assert not found, "\n".join(found)


def test_every_quantity_is_served_by_one_registered_dataset():
    from kinset.quantities import QUANTITIES
    served = [q for record in registry.DATASETS for q in record.quantities()]
    assert sorted(served) == sorted(QUANTITIES)          # each quantity once
    assert all(record.quantities() for record in registry.DATASETS)
    # the schema's list of quantities is the same list (a profile can name each of them)
    import json
    schema = json.loads((SRC / "schemas" / "application.schema.json").read_text(encoding="utf-8"))
    enums = [v["enum"] for v in _walk(schema) if isinstance(v, dict) and "enum" in v
             and "forward_voltage" in v["enum"]]
    assert enums and all(sorted(e) == sorted(QUANTITIES) for e in enums)


def _walk(node):
    yield node
    children = node.values() if isinstance(node, dict) else node if isinstance(node, list) else ()
    for child in children:
        yield from _walk(child)
