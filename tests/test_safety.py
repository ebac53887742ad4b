"""Input files are data, never code, and never point outside the reel folder.

Outside references:

* PyYAML's documentation: ``yaml.load`` with the full or unsafe loader constructs
  arbitrary Python objects (``!!python/object/apply:os.system``); ``SafeLoader`` only
  builds plain scalars, lists and mappings.
* Python's documentation of ``pickle``: "It is possible to construct malicious pickle
  data which will execute arbitrary code during unpickling"; ``numpy.load`` says the
  same of ``allow_pickle=True``. scikit-rf 2.x's ``Network(path)`` tries ``pickle.load`` on
  the file before it reads it as Touchstone (its ``Network.__init__``), so kinset never
  calls it with a path.
* Python's ``eval``/``exec``/``compile`` run strings as code.

The source checks read ``src/kinset`` with Python's ``ast`` module; each one is shown
to fire on a small probe, so none can pass by looking at nothing. The behaviour checks
feed hostile files to kinset's readers and check that nothing ran.
"""

from __future__ import annotations

import ast
import os
import pickle
import textwrap
from pathlib import Path

import pytest
import yaml

from kinset.errors import InputError
from kinset.io.config import read_yaml
from kinset.io.reel import load_reel
from kinset.io.touchstone import read_touchstone, read_vna_index
from kinset.io.profiles import shipped_profiles

SRC = Path(__file__).resolve().parents[1] / "src" / "kinset"

UNSAFE_YAML = {"unsafe_load", "unsafe_load_all", "full_load", "full_load_all"}
LOADER_CALLS = {"load", "load_all", "compose", "compose_all", "parse", "scan"}
CODE_BUILTINS = {"eval", "exec", "compile", "__import__"}
BANNED_MODULES = {"pickle", "cPickle", "dill", "shelve", "marshal", "joblib", "cloudpickle"}
UNPICKLING_READERS = {"read_pickle", "read_hdf"}


def _module_classes(tree: ast.Module) -> dict[str, list[str]]:
    """Class name -> its base classes as written (``yaml.SafeLoader``, ...)."""
    return {n.name: [ast.unparse(b) for b in n.bases]
            for n in ast.walk(tree) if isinstance(n, ast.ClassDef)}


def findings(path: Path, root: Path) -> list[str]:
    """Every place in one source file that could run input data as code."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    classes = _module_classes(tree)
    where = lambda n: f"{path.relative_to(root)}:{n.lineno}"          # noqa: E731
    found = []
    for node in ast.walk(tree):
        if isinstance(node, (ast.Import, ast.ImportFrom)):
            names = [a.name for a in node.names] + ([node.module] if isinstance(node, ast.ImportFrom)
                                                     and node.module else [])
            if any(n.split(".")[0] in BANNED_MODULES for n in names):
                found.append(f"{where(node)}: imports a pickle-like module")
        if not isinstance(node, ast.Call):
            continue
        f = node.func
        name = f.attr if isinstance(f, ast.Attribute) else getattr(f, "id", "")
        owner = ast.unparse(f.value) if isinstance(f, ast.Attribute) else ""
        if isinstance(f, ast.Name) and name in CODE_BUILTINS:
            found.append(f"{where(node)}: {name}()")
        if name in ("eval", "query") and owner in ("pd", "pandas"):
            found.append(f"{where(node)}: pandas {name}() of a string")
        if name in UNPICKLING_READERS:
            found.append(f"{where(node)}: {name}() can unpickle")
        if owner == "yaml" and name in UNSAFE_YAML:
            found.append(f"{where(node)}: yaml.{name}")
        if owner == "yaml" and name in LOADER_CALLS:
            loader = next((k.value for k in node.keywords if k.arg == "Loader"),
                          node.args[1] if len(node.args) > 1 else None)
            text = ast.unparse(loader) if loader is not None else ""
            safe = text in ("yaml.SafeLoader", "yaml.CSafeLoader") or \
                any(b in ("yaml.SafeLoader", "yaml.CSafeLoader") for b in classes.get(text, []))
            if not safe:
                found.append(f"{where(node)}: yaml.{name} without a safe loader ({text or 'none'})")
        if owner in ("np", "numpy") and name == "load":
            flag = next((k.value for k in node.keywords if k.arg == "allow_pickle"), None)
            if not (isinstance(flag, ast.Constant) and flag.value is False):
                found.append(f"{where(node)}: np.load without allow_pickle=False")
        if name == "Network" and (node.args or any(k.arg == "file" for k in node.keywords)):
            found.append(f"{where(node)}: skrf.Network(file) unpickles before parsing")
    return found


def test_source_never_runs_input_as_code():
    hits = [h for p in sorted(SRC.rglob("*.py")) for h in findings(p, SRC)]
    assert hits == []


def test_source_check_fires_on_each_unsafe_form(tmp_path):
    probe = tmp_path / "probe.py"
    probe.write_text(textwrap.dedent("""
        import pickle
        import numpy as np, pandas as pd, skrf, yaml
        class Loose(yaml.FullLoader):
            pass
        def f(path, text):
            yaml.load(text, Loader=Loose)
            yaml.load(text, Loader=yaml.Loader)
            yaml.unsafe_load(text)
            yaml.full_load(text)
            np.load(path)
            np.load(path, allow_pickle=True)
            eval(text)
            exec(text)
            pd.eval(text)
            pd.read_pickle(path)
            skrf.Network(path)
    """))
    assert len(findings(probe, tmp_path)) == 12
    ok = tmp_path / "ok.py"
    ok.write_text(textwrap.dedent("""
        import numpy as np, skrf, yaml
        class Strict(yaml.SafeLoader):
            pass
        def f(path, text):
            yaml.safe_load(text)
            yaml.load(text, Loader=Strict)
            np.load(path, allow_pickle=False)
            net = skrf.Network()
            net.read_touchstone(path)
    """))
    assert findings(ok, tmp_path) == []


class _Payload:
    """Unpickling this touches a marker file: proof that unpickling ran code."""

    def __init__(self, marker: Path):
        self.marker = str(marker)

    def __reduce__(self):
        return (Path.touch, (Path(self.marker),))


def test_a_pickle_named_as_touchstone_runs_nothing(tmp_path):
    marker = tmp_path / "code-ran"
    bad = tmp_path / "vna_X_0V.s1p"
    bad.write_bytes(pickle.dumps(_Payload(marker)))
    with pytest.raises(InputError) as err:
        read_touchstone(bad)
    assert str(bad) in str(err.value)
    assert not marker.exists()
    # The payload works (the reference): unpickling the file runs it.
    pickle.loads(bad.read_bytes())
    assert marker.exists()


def test_yaml_python_tags_are_refused_and_run_nothing(tmp_path):
    marker = tmp_path / "code-ran"
    path = tmp_path / "reel.yaml"
    path.write_text(f"material: silicon\npart: !!python/object/apply:os.system "
                    f"['touch {marker}']\n", encoding="utf-8")
    with pytest.raises(InputError) as err:
        read_yaml(path)
    assert str(path) in str(err.value) and "line 2" in str(err.value)
    assert not marker.exists()
    # The same text through PyYAML's unsafe loader would have run it (the reference):
    yaml.unsafe_load(path.read_text())
    assert marker.exists()


# --------------------------------------------------------------------------- paths

def _reel_with_index(tmp_path: Path, rows: list[str]) -> Path:
    reel = tmp_path / "reel"
    (reel / "capacitance").mkdir(parents=True)
    (reel / "reel.yaml").write_text("material: silicon\n")
    (reel / "capacitance" / "index.csv").write_text(
        "file,device,reverse_voltage_V,fixture\n" + "".join(r + "\n" for r in rows))
    return reel / "capacitance" / "index.csv"


@pytest.mark.parametrize("file", [
    "../../outside.s1p", "sub/../../../outside.s1p", "/etc/hostname", "..\\..\\outside.s1p",
    "C:\\data\\x.s1p", "C:x.s1p", "\\\\server\\share\\x.s1p", "//server/share/x.s1p",
])
def test_index_paths_outside_the_reel_are_refused(tmp_path, file):
    index = _reel_with_index(tmp_path, ["inside.s1p,A,0,reflection", f"{file},B,0,reflection"])
    with pytest.raises(InputError) as err:
        read_vna_index(index)
    assert (err.value.file, err.value.line, err.value.column) == (str(index), 3, "file")
    assert "outside the reel" in err.value.message or "absolute" in err.value.message


@pytest.mark.parametrize("file", ["x.s1p", "sub/x.s1p", "../x.s1p", "sub/../x.s1p", "sub\\x.s1p"])
def test_index_paths_inside_the_reel_are_kept(tmp_path, file):
    index = _reel_with_index(tmp_path, [f"{file},A,0,reflection"])
    frame = read_vna_index(index)
    reel = os.path.realpath(tmp_path / "reel")
    assert os.path.realpath(frame["path"].iloc[0]).startswith(reel + os.sep)


@pytest.mark.parametrize("item", ["../shared/mixer.yaml", "/etc/mixer.yaml", "a/../../m.yaml",
                                  "C:\\profiles\\m.yaml"])
def test_reel_yaml_application_paths_stay_in_the_reel(tmp_path, item):
    reel = tmp_path / "reel"
    reel.mkdir()
    (reel / "reel.yaml").write_text(f"material: silicon\napplications:\n  - detector_pair\n"
                                    f"  - '{item}'\n")
    with pytest.raises(InputError) as err:
        load_reel(reel)
    assert (err.value.file, err.value.line) == (str(reel / "reel.yaml"), 4)
    assert "--config application=" in err.value.message


def test_reel_yaml_application_inside_the_reel_is_accepted(tmp_path):
    reel = tmp_path / "reel"
    (reel / "profiles").mkdir(parents=True)
    (reel / "profiles" / "mine.yaml").write_text(
        shipped_profiles()["detector_pair"].read_text(encoding="utf-8"), encoding="utf-8")
    (reel / "reel.yaml").write_text("material: silicon\napplications: [detector_pair, "
                                    "profiles/mine.yaml]\n")
    assert load_reel(reel).settings["applications"] == ["detector_pair", "profiles/mine.yaml"]
