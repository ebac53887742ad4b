"""Every file kinset writes replaces its target in one step, never leaving a part of it.

Outside reference: POSIX ``rename()`` (IEEE Std 1003.1, which Python's ``os.replace``
calls) replaces the target atomically: a reader opening the path sees either the old
file or the new one. So a writer that writes a temporary file beside the target and
renames it at the end can never expose a half-written file, and if it is killed
midway the target is untouched. The checks here: the writer behaves like that when the
writing fails, and (by reading kinset's own source with Python's ``ast``) no other
way of writing a file exists in ``src/kinset``.
"""

from __future__ import annotations

import ast
import os
import signal
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from kinset.io.output import atomic_output, read_result, write_csv, write_text
from kinset.io.parsed import load_parsed, save_parsed

SRC = Path(__file__).resolve().parents[1] / "src" / "kinset"


def test_a_failed_write_leaves_the_old_file_and_no_temporary(tmp_path):
    target = tmp_path / "table.csv"
    write_csv(pd.DataFrame({"device": ["A"], "x": [1.0]}), target)
    before = target.read_bytes()

    class Boom(Exception):
        pass

    with pytest.raises(Boom):
        with atomic_output(target) as fh:
            fh.write("device,x\nB,2\n")
            fh.flush()
            assert target.read_bytes() == before     # the target is not touched while writing
            raise Boom
    assert target.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["table.csv"]


def test_long_columns_are_written_as_pandas_writes_them(tmp_path):
    # Reference: pandas.DataFrame.to_csv(float_format="%.10g", index=False), byte for
    # byte, on columns long enough to be formatted one distinct value at a time: few
    # distinct floats with NaN, both signed zeros, ints, bools, text with missing cells
    # and a comma, text mixed with numbers (1 and 1.0 print differently), mostly distinct.
    n = 3000
    rng = np.random.default_rng(8)
    few = rng.choice([1e-5, 0.1, 1.0 / 3.0, np.nan, 2.5e7], n)
    frame = pd.DataFrame({
        "device": rng.choice(["D1", "D2", "x,y", None], n).astype(object),
        "few": few,
        "zeros": rng.choice([0.0, -0.0, 1.0], n),
        "ints": rng.integers(0, 5, n), "flags": rng.random(n) < 0.5,
        "mixed": pd.Series(rng.choice([1, 1.0, "1", True], n).tolist(), dtype=object),
        "many": rng.normal(size=n),
    })
    write_csv(frame, tmp_path / "ours.csv")
    frame.to_csv(tmp_path / "pandas.csv", index=False, float_format="%.10g")
    assert (tmp_path / "ours.csv").read_bytes() == (tmp_path / "pandas.csv").read_bytes()


def test_text_csv_and_npz_round_trip(tmp_path):
    frame = pd.DataFrame({"device": ["A", "B"], "v": [0.5, 1.0 / 3.0]})
    write_csv(frame, tmp_path / "sub" / "t.csv")             # creates the folder
    back = read_result(tmp_path / "sub" / "t.csv")
    assert list(back["device"]) == ["A", "B"] and back["v"][1] == pytest.approx(1 / 3, rel=1e-9)
    write_text(tmp_path / "x.txt", "one\ntwo\n")
    assert (tmp_path / "x.txt").read_bytes() == b"one\ntwo\n"
    save_parsed(pd.DataFrame({"device": ["A"], "voltage": [0.7]}), tmp_path / "p.npz")
    got = load_parsed(tmp_path / "p.npz")
    assert list(got["device"]) == ["A"] and got["voltage"][0] == 0.7
    assert sorted(p.name for p in tmp_path.iterdir()) == ["p.npz", "sub", "x.txt"]


def test_a_writer_killed_midway_leaves_no_partial_target(tmp_path):
    """A process killed (SIGKILL) while writing a large table over an older one: the
    target keeps its old contents."""
    target = tmp_path / "big.csv"
    write_text(target, "device,x\nold,1\n")
    code = textwrap.dedent(f"""
        import numpy as np, pandas as pd, sys
        from kinset.io.output import write_csv
        frame = pd.DataFrame({{"device": np.arange(3_000_000).astype(str), "x": 1.5}})
        print("ready", flush=True)
        write_csv(frame, {str(target)!r})
    """)
    proc = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True)
    assert proc.stdout.readline().strip() == "ready"
    deadline = time.monotonic() + 60
    while not list(tmp_path.glob(".big.csv.*.tmp")) and time.monotonic() < deadline:
        time.sleep(0.005)                                   # wait until it is writing
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    assert list(tmp_path.glob(".big.csv.*.tmp")), "the writer never started writing"
    assert target.read_text() == "device,x\nold,1\n"


# --------------------------------------------------------------------------- the source

# Calls that write a file when given a path. Each must sit inside `with atomic_output(...)`
# (whose handle it then receives), except where it writes into an in-memory buffer.
WRITE_METHODS = {"write_text", "write_bytes", "to_csv", "to_json", "to_parquet", "to_excel",
                 "to_pickle", "savefig", "savez", "savez_compressed", "save", "savetxt",
                 "tofile", "dump", "copy", "copyfile", "copy2", "move", "rename", "replace",
                 "write_touchstone"}


def _calls_outside_atomic_output(path: Path, root: Path = SRC) -> list[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    parents = {child: node for node in ast.walk(tree) for child in ast.iter_child_nodes(node)}
    buffers = set()            # names bound to io.BytesIO() / io.StringIO()
    for node in ast.walk(tree):
        if isinstance(node, ast.Assign) and isinstance(node.value, ast.Call):
            f = node.value.func
            if isinstance(f, ast.Attribute) and f.attr in ("BytesIO", "StringIO"):
                buffers |= {t.id for t in node.targets if isinstance(t, ast.Name)}

    def inside_atomic(node) -> bool:
        while node in parents:
            node = parents[node]
            if isinstance(node, ast.With) and any(
                    isinstance(i.context_expr, ast.Call)
                    and getattr(i.context_expr.func, "id", getattr(i.context_expr.func, "attr", ""))
                    == "atomic_output" for i in node.items):
                return True
        return False

    found = []
    for node in ast.walk(tree):
        if not isinstance(node, ast.Call):
            continue
        f = node.func
        name = f.attr if isinstance(f, ast.Attribute) else getattr(f, "id", "")
        if name == "open":
            mode = node.args[1] if len(node.args) > 1 else next(
                (k.value for k in node.keywords if k.arg == "mode"), None)
            writes = not (isinstance(mode, ast.Constant) and set(str(mode.value)) <= set("rbt"))
            if mode is None:
                writes = False
        elif isinstance(f, ast.Attribute) and name in WRITE_METHODS:
            # str.replace / dict.copy / a k-d tree's query... are not file writes: only
            # calls whose first argument could be a path, or the file modules' functions.
            owner = f.value.id if isinstance(f.value, ast.Name) else ""
            if name in ("copy", "replace", "rename", "move", "dump", "save") and \
                    owner not in ("shutil", "os", "json", "np", "numpy", "pickle"):
                continue
            first = node.args[0] if node.args else None
            to_string = any(k.arg == "return_string" and getattr(k.value, "value", 0) is True
                            for k in node.keywords)     # skrf: text returned, not written
            writes = not (isinstance(first, ast.Name) and first.id in buffers) and not to_string
        else:
            continue
        if writes and not inside_atomic(node):
            found.append(f"{path.relative_to(root)}:{node.lineno}: {ast.unparse(node)[:70]}")
    return found


def test_every_writer_in_src_goes_through_atomic_output():
    own = SRC / "io" / "output.py"
    found = [hit for p in sorted(SRC.rglob("*.py")) if p != own
             for hit in _calls_outside_atomic_output(p)]
    assert found == []


def test_the_source_check_sees_a_direct_write(tmp_path):
    """The check above is not vacuous: it flags each way of writing it knows."""
    text = textwrap.dedent("""
        import json, shutil, numpy as np
        from pathlib import Path
        def f(frame, path, fig):
            frame.to_csv(path)
            Path(path).write_text("x")
            open(path, "w").write("x")
            np.savez(path, a=1)
            fig.savefig(path)
            json.dump({}, open(path, "a"))
            shutil.copy(path, path)
    """)
    probe = tmp_path / "probe.py"
    probe.write_text(text)
    assert len(_calls_outside_atomic_output(probe, tmp_path)) == 8
