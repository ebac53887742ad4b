"""The ledger and the commands that keep it: keep, retire, replace, and the results folder
that belongs to one reel folder.

The reel is the small invented demo reel (tests/report_tools.py); the checks are the
contract's (../shared/contract.md, "Over time: the ledger"): kept sets keep their numbers
and members, retired parts are never offered again, a hand-edited ledger is checked like
every input with the file and the line named.
"""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from kinset.cli import main
from kinset.errors import InputError
from kinset.io.ledger import read_ledger
from kinset.io.reel import OWNER_NAME, owner_text
from kinset.matching.criteria import spread
from kinset.matching.run import candidates, read_results, run_match
from kinset.matching.upkeep import parse_sets
from kinset.matching.profile import load_profile
from report_tools import demo_results

APP = "audio_clipper_pair"


@pytest.fixture(scope="module")
def reel_and_results(tmp_path_factory):
    folder = tmp_path_factory.mktemp("ledger")
    results = demo_results(folder, devices=60, markup_id=False)
    (results / OWNER_NAME).write_text(owner_text(results, folder / "reel"), encoding="utf-8")
    return folder / "reel", results


@pytest.fixture
def cycle(reel_and_results, tmp_path):
    """A fresh copy of the reel and its results (the ledger starts empty)."""
    reel, results = reel_and_results
    shutil.copytree(reel, tmp_path / "reel")
    shutil.copytree(results, tmp_path / "results")
    return tmp_path / "reel", tmp_path / "results"


def sets_of(folder: Path) -> pd.DataFrame:
    return pd.read_csv(folder / "sets.csv", dtype={"device": str})


def test_kept_sets_keep_numbers_and_members_and_new_sets_follow_them(cycle):
    reel, results = cycle
    run_match(results, APP, results / APP)
    before = sets_of(results / APP)
    assert (before["state"] == "new").all() and len(before)
    assert main(["keep", "--results", str(results), "--application", APP, "--sets", "1-3",
                 "--note", "bins 1-3"]) == 0
    ledger = read_ledger(reel / "ledger.csv")
    assert sorted({e.set for e in ledger.entries}) == [1, 2, 3]
    run_match(results, APP, results / APP)
    after = sets_of(results / APP)
    kept = after[after["state"] == "kept"]
    old = before[before["set"] <= 3]
    assert kept[["set", "device"]].values.tolist() == old[["set", "device"]].values.tolist()
    assert (kept["check"] == "ok").all()
    assert after.loc[after["state"] == "new", "set"].min() == 4
    picks = pd.read_csv(results / APP / "unmatched.csv")    # accounting: each part once
    assert len(picks) + len(after) == len(read_results(results)[1])
    assert set(picks["device"]).isdisjoint(after["device"])


def test_a_retired_member_breaks_its_set_and_replace_proposes_only_valid_free_parts(cycle):
    reel, results = cycle
    run_match(results, APP, results / APP)
    main(["keep", "--results", str(results), "--application", APP, "--sets", "1"])
    first = sets_of(results / APP).query("set == 1")["device"].tolist()
    main(["retire", "--reel", str(reel), "--device", first[0], "--note", "cracked"])
    run_match(results, APP, results / APP)
    now = sets_of(results / APP)
    assert now.query("set == 1")["check"].tolist() == ["broken"]
    un = pd.read_csv(results / APP / "unmatched.csv", dtype={"device": str}).set_index("device")
    assert un.loc[first[0], "stage"] == "taken" and un.loc[first[0], "reason_code"] == "retired"
    from kinset.matching.upkeep import replacement
    table, remaining, _ = replacement(results, APP, 1, first[0])
    assert remaining == first[1:] and len(table)
    # each proposal marked valid is valid: recomputed from the candidates' own values
    tables, devices, settings = read_results(results)
    c = candidates(tables, devices, load_profile(APP), settings["accuracy"])
    raw = pd.DataFrame(c.raw, index=c.devices)
    for dev, ok in zip(table["device"], table["within"]):
        block = raw.loc[[dev] + remaining].to_numpy()
        valid = all(spread(block[:, j], d) <= c.tolerance[d.name] * (1 + 1e-9)
                    for j, d in enumerate(load_profile(APP).dimensions))
        assert bool(ok) == valid
        assert dev not in {first[0]} and dev not in set(now.query("state == 'kept'")["device"])
    assert main(["replace", "--results", str(results), "--application", APP, "--set", "1",
                 "--device", first[0], "--apply"]) == 0
    run_match(results, APP, results / APP)
    set1 = sets_of(results / APP).query("set == 1")
    assert set1["check"].tolist() == ["ok", "ok"] and first[0] not in set(set1["device"])
    assert first[1] in set(set1["device"])


def test_a_quota_stops_an_application_and_leaves_the_rest(cycle):
    _, results = cycle
    full = run_match(results, APP, results / "full")
    capped = run_match(results, APP, results / "capped", sets_wanted=5)
    assert full.summary["sets"] > 5 and capped.summary["sets"] == 5
    left = capped.unmatched.set_index("device")
    assert (left["reason_code"] == "quota_reached").sum() == 2 * (full.summary["sets"] - 5)
    # a second application after it: parts of the 5 sets are taken, the rest offered
    second = run_match(results, "germanium_clipper_pair", results / "second",
                       after=[results / "capped"])
    taken = second.unmatched[second.unmatched["stage"] == "taken"]
    assert set(taken["device"]) == set(capped.sets["device"])
    assert (taken["reason_code"] == "placed_earlier").all()
    assert taken["reason"].str.contains(f"placed in {APP} set").all()


@pytest.mark.parametrize("text,line,message", [
    ("device,application,set,state,date,note\nD001,{app},1,kept,2026-13-01,\n", 2, "not a date"),
    ("device,application,set,state,date,note\nD001,{app},1,kept,2026-12-01,\n"
     "D001,{app},2,kept,2026-12-01,\n", 3, "line 2 already"),
    ("device,application,set,state,date,note\nNOPE,{app},1,kept,2026-12-01,\n", 2,
     "in no input"),
    ("device,application,set,state,date,note\nD001,{app},1,kept,2026-12-01,\n"
     "D002,{app},1,kept,2026-12-01,\nD004,{app},1,kept,2026-12-01,\n", 4, "sets of 2"),
    ("device,application,set,state,date,note\nD001,{app},1,lost,2026-12-01,\n", 2, "state"),
    ("device,application,set,state,date,note\nD001,{app},x,kept,2026-12-01,\n", 2, "not a set"),
    ("device,application,state,date,note\nD001,{app},kept,2026-12-01,\n", 1, "missing column"),
])
def test_a_hand_edited_ledger_is_checked_with_its_line(cycle, text, line, message):
    reel, results = cycle
    path = reel / "ledger.csv"
    path.write_text(text.format(app=APP), encoding="utf-8")
    with pytest.raises(InputError) as err:
        run_match(results, APP, results / APP)
    assert err.value.file == str(path) and err.value.line == line
    assert message in err.value.message


def test_parse_sets():
    assert parse_sets("1-3,7, 5") == [1, 2, 3, 5, 7]
    with pytest.raises(InputError):
        parse_sets("3-1")


def test_a_second_reel_folder_with_the_same_id_stops(tmp_path):
    from kinset.demo import write_demo
    root = Path(__file__).resolve().parents[1]
    a = write_demo(tmp_path / "a", devices=20, seed=1)
    b = write_demo(tmp_path / "b", devices=20, seed=2)
    for folder in (a, b):      # the same reel id in both (the demo's own)
        text = (folder / "reel.yaml").read_text(encoding="utf-8")
        (folder / "reel.yaml").write_text(text.replace("\nreel: ", "\nreel: same-id\n# was: "),
                                          encoding="utf-8")

    def run(folder, *targets):
        return subprocess.run([sys.executable, "-m", "snakemake", "-s", str(root / "Snakefile"),
                               "--cores", "2", "--directory", str(tmp_path), *targets,
                               "--config", f"reel={folder}", f"results={tmp_path / 'results'}"],
                              capture_output=True, text=True, timeout=300)
    # The first reel claims results/same-id/ with the job that writes its owner file
    # (rule reel_settings): the whole workflow behind it decides nothing here.
    owner = tmp_path / "results" / "same-id" / "reel_folder.txt"
    first = run(a, str(owner))
    assert first.returncode == 0, first.stderr
    assert owner.is_file()
    second = run(b)
    assert second.returncode != 0
    out = second.stdout + second.stderr
    assert "same-id" in out and str(a.name) in out and "--config results=" in out
