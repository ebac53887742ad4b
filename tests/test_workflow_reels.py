"""Several reels in one Snakemake run: each reel keeps its own results/<reel id>/, its own
applications and ledger, and one reel alone runs exactly as before.

The reference is Snakemake's own dry-run output (``--dry-run --printshellcmds``): the jobs
it plans, their output files and their shell commands, parsed from what it prints. The
reels are invented and written by ``kinset demo --devices 20`` with two seeds (their ids
come from the seed: ``demo-0412`` and ``demo-0007``).
"""

import shutil
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from kinset.errors import InputError
from kinset.io.config import validate
from kinset.io.reel import results_owner
from kinset.workflow import DEMO_REELS, make_plans

ROOT = Path(__file__).resolve().parents[1]
pytestmark = pytest.mark.workflow

SEEDS = {"demo-0412": 412, "demo-0007": 7}


@pytest.fixture(scope="module")
def reels(tmp_path_factory) -> dict[str, Path]:
    """Two 20-part demo reels, by reel id."""
    base = tmp_path_factory.mktemp("reels")
    out = {}
    for reel_id, seed in SEEDS.items():
        folder = base / f"reel-{seed}"
        r = subprocess.run([sys.executable, "-m", "kinset", "demo", "--out", str(folder),
                            "--devices", "20", "--seed", str(seed)],
                           capture_output=True, text=True, timeout=300)
        assert r.returncode == 0, r.stderr
        out[reel_id] = folder
    return out


def snakemake(work: Path, *args, reel: str | None = None):
    config = ([f"reel={reel}"] if reel is not None else []) + [f"results={work / 'results'}"]
    cmd = [sys.executable, "-m", "snakemake", "-s", str(ROOT / "Snakefile"), "--cores", "2",
           "--directory", str(work), *args, "--config", *config]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=600)


def planned(work: Path, *args, reel: str | None = None) -> set[tuple[str, str, str]]:
    """The jobs of Snakemake's dry run: (rule, its output files, its shell command); the
    target rule 'all' runs no command and is left out."""
    r = snakemake(work, "--dry-run", "--printshellcmds", *args, reel=reel)
    assert r.returncode == 0, r.stderr + r.stdout
    jobs, rule, output = set(), None, ""
    for line in (r.stdout + r.stderr).splitlines():
        text = line.strip()
        if text.startswith(("rule ", "localrule ")) and text.endswith(":"):
            rule, output = text.split()[1].rstrip(":"), ""
        elif text.startswith("output:"):
            output = text.split(":", 1)[1].strip()
        elif text.startswith("Shell command:") and rule is not None:
            command = text.split(":", 1)[1].strip()
            if command != "None":
                jobs.add((rule, output, command))
            rule = None
        elif text.startswith("Nothing to be done"):
            return set()
    return jobs


def of_reel(jobs, results: Path, reel_id: str):
    prefix = f"{results}/{reel_id}/"
    return {j for j in jobs if j[1].startswith(prefix)}


def test_two_reels_plan_each_reels_own_jobs_and_one_reel_is_unchanged(reels, tmp_path):
    """The dry run of both reels is exactly the union of each reel's dry run alone (same
    rules, outputs and commands), and a comma list, a config-file list and one path give
    the same jobs (Snakemake's dry-run output)."""
    a, b = reels["demo-0412"], reels["demo-0007"]
    alone_a, alone_b = planned(tmp_path, reel=str(a)), planned(tmp_path, reel=str(b))
    both = planned(tmp_path, reel=f"{a},{b}")
    results = tmp_path / "results"
    assert both == alone_a | alone_b
    assert of_reel(both, results, "demo-0412") == alone_a
    assert of_reel(both, results, "demo-0007") == alone_b
    assert {r for r, _, _ in alone_a} >= {"parse", "extract_forward", "devices", "match", "report"}
    # one reel's commands name only its own folder and results
    assert all(str(b) not in cmd for _, _, cmd in alone_a)
    assert planned(tmp_path, reel=f"{a},") == alone_a
    configfile = tmp_path / "reels.yaml"
    configfile.write_text(f"reel:\n  - {a}\n  - {b}\n", encoding="utf-8")
    assert planned(tmp_path, "--configfile", str(configfile)) == both


def test_the_default_is_every_demo_reel_folder_present(reels, tmp_path):
    """No reel given: data_demo/ alone while data_demo_rf/ is absent, both once it is there."""
    work = tmp_path / "clone"
    work.mkdir()
    shutil.copytree(reels["demo-0412"], work / DEMO_REELS[0])
    results = work / "results"
    only_first = planned(work)
    assert only_first and all(o.startswith(f"{results}/demo-0412/") for r, o, _ in only_first)
    shutil.copytree(reels["demo-0007"], work / DEMO_REELS[1])
    both = planned(work)
    assert of_reel(both, results, "demo-0412") == only_first
    assert of_reel(both, results, "demo-0007")
    shutil.rmtree(work / DEMO_REELS[0])
    assert of_reel(planned(work), results, "demo-0412") == set()


def last_words(stderr: str, results: Path) -> list[str]:
    """The result block at the end of a run: each reel's ``kinset: <results>/<reel>/``
    line and the indented application and circuit lines under it."""
    words, inside = [], False
    for line in stderr.splitlines():
        if line.startswith(f"kinset: {results}"):
            inside = True
        elif not line.startswith("  "):
            inside = False
        if inside:
            words.append(line)
    return words


def test_two_reels_run_into_their_own_results_and_rerun_nothing(reels, tmp_path):
    a, b = reels["demo-0412"], reels["demo-0007"]
    r = snakemake(tmp_path, reel=f"{a},{b}")
    assert r.returncode == 0, r.stderr[-3000:]
    for reel_id, folder in reels.items():
        out = tmp_path / "results" / reel_id
        # every part of the reel's own truth table (the generator's), and no other
        truth = pd.read_csv(folder / "truth.csv", comment="#", dtype={"device": str})
        devices = pd.read_csv(out / "devices.csv", dtype={"device": str})
        assert set(devices["device"]) == set(truth["device"])
        assert results_owner(out).samefile(folder)
        for app in ("ring_mixer_quad", "audio_clipper_pair"):   # each reel.yaml's list
            for f in ("sets.csv", "unmatched.csv", "values.csv", "summary.json",
                      "report.html", "models.lib", "pick_list.csv"):
                assert (out / app / f).stat().st_size > 0, (reel_id, app, f)
            # the circuit step: one row per set when the profile names a circuit (the
            # shipped ring mixer does), a note and no rows when it does not
            circuit = pd.read_csv(out / app / "circuit.csv", comment="#")
            sets = pd.read_csv(out / app / "sets.csv")["set"].unique()
            has_circuit = "\ncircuit:" in (ROOT / "src" / "kinset" / "applications" /
                                           f"{app}.yaml").read_text(encoding="utf-8")
            assert sorted(circuit["set"]) == (sorted(sets) if has_circuit else []), app
    # a no-op rerun: Snakemake plans nothing, and running it ends on the run's own last
    # words (Snakemake skips its onsuccess hook when there is nothing to do)
    assert planned(tmp_path, reel=f"{a},{b}") == set()
    words = last_words(r.stderr, tmp_path / "results")
    assert len(words) == 2 * (1 + 2 * 2), words     # per reel: folder; per application 2 lines
    again = snakemake(tmp_path, reel=f"{a},{b}")
    assert again.returncode == 0 and "Nothing to be done" in again.stderr, again.stderr
    assert last_words(again.stderr, tmp_path / "results") == words
    # new data in one reel reruns that reel's jobs only
    extra = a / "forward" / "zz_extra.csv"
    first = sorted((a / "forward").glob("*.csv"))[0]
    shutil.copy(first, extra)
    try:
        again = planned(tmp_path, reel=f"{a},{b}")
    finally:
        extra.unlink()
    assert again and of_reel(again, tmp_path / "results", "demo-0007") == set()
    assert {r for r, _, _ in again} >= {"parse", "extract_forward", "devices"}


def test_bad_reel_lists_are_clear_errors(reels, tmp_path):
    a = reels["demo-0412"]
    twin = tmp_path / "twin"
    shutil.copytree(a, twin)
    config = validate({"reel": f"{a},{twin}", "results": str(tmp_path / "res")},
                      "workflow", "--config")
    with pytest.raises(InputError, match="reel id 'demo-0412' is given by two reel folders") as e:
        make_plans(config)
    assert str(a) in str(e.value) and str(twin) in str(e.value)
    config["reel"] = [str(a), str(a)]
    with pytest.raises(InputError, match="is listed twice"):
        make_plans(config)
    config["reel"] = [str(a), str(tmp_path / "missing")]
    with pytest.raises(InputError, match="missing"):
        make_plans(config)
    config["reel"] = " , "
    with pytest.raises(InputError, match="names no folder"):
        make_plans(config)
