"""The matcher end to end on fitted tables: optimum, validity, reasons, accounting."""

import itertools

import networkx as nx
import numpy as np
import pandas as pd
import pytest
from scipy.optimize import Bounds, LinearConstraint, milp
from scipy.sparse import lil_matrix

from kinset.errors import InputError
from kinset.fitting.forward import ForwardSettings, fit_forward
from kinset.matching.profile import load_profile
from kinset.matching.partners import partner_table
from kinset.matching.run import match
from kinset.physics.forward import voltage_from_current

T25 = 298.15
CURRENTS = [1e-5, 1e-4, 1e-3, 1e-2]


def tight_batch(n=60, seed=3):
    """Simulated parts of one tight batch, swept 10 µA–10 mA (invented, demo-like data)."""
    rng = np.random.default_rng(seed)
    z = rng.normal(size=n)
    i_s = 2.7e-9 * np.exp(0.05 * z + 0.02 * rng.normal(size=n))
    n_ = 1.85 + 0.004 * z + 0.002 * rng.normal(size=n)
    rs = rng.uniform(0.4, 0.8, n)
    sweep = np.logspace(-5, -2, 16)
    rows = []
    for k in range(n):
        v = voltage_from_current(sweep, i_s[k], n_[k], rs[k], T25)
        rows.append(pd.DataFrame({"device": f"T{k:03d}", "voltage": v, "current": sweep,
                                  "temperature": T25, "position": k + 1, "source": "m", "line": 0}))
    table, readings = fit_forward(pd.concat(rows), ForwardSettings(T25, T25, 1.11, 3.0, 0.0))
    return {"forward": table, "forward_readings": readings}


def profile(tmp_path, size, tol, guard="none", extra=""):
    p = tmp_path / f"p{size}.yaml"
    p.write_text(f"set_size: {size}\nguard_band: {guard}\nmatch:\n"
                 f"  - {{quantity: forward_voltage, at_current_A: {CURRENTS}, tolerance_V: {tol}}}\n"
                 + extra)
    return load_profile(str(p))


def recheck_voltages(tables, members):
    t = tables["forward"].set_index("device").loc[members]
    return np.array([[voltage_from_current(i, r.is_A, r.n, r.rs_ohm, T25) for i in CURRENTS]
                     for r in t.itertuples()])


def milp_optimum(volts: np.ndarray, size: int, tol: float) -> int:
    """Independent reference: the set-packing optimum by HiGHS (scipy.optimize.milp)
    over every valid set (a k-clique of the pairwise-compatibility graph)."""
    g = nx.Graph()
    g.add_nodes_from(range(len(volts)))
    for a, b in itertools.combinations(range(len(volts)), 2):
        if np.max(np.abs(volts[a] - volts[b])) <= tol:
            g.add_edge(a, b)
    # every valid set is a k-subset of some maximal clique (Bron–Kerbosch, networkx)
    cands = sorted({tuple(sorted(sub)) for c in nx.find_cliques(g) if len(c) >= size
                    for sub in itertools.combinations(c, size)})
    return max_packing(len(volts), cands)


def max_packing(n: int, sets) -> int:
    """The most pairwise-disjoint sets among ``sets`` (tuples of rows 0..n-1): maximum
    set packing as a 0/1 programme solved by HiGHS (scipy.optimize.milp)."""
    sets = list(sets)
    if not sets:
        return 0
    a = lil_matrix((n, len(sets)))
    for j, c in enumerate(sets):
        for m in c:
            a[m, j] = 1
    res = milp(-np.ones(len(sets)), integrality=np.ones(len(sets)), bounds=Bounds(0, 1),
               constraints=LinearConstraint(a.tocsr(), 0, 1))
    return int(round(-res.fun))


@pytest.mark.parametrize("size,tol", [(2, 1.5e-3), (4, 2.5e-3)])
def test_tight_batch_reaches_the_milp_optimum_and_every_set_is_valid(tmp_path, size, tol):
    tables = tight_batch()
    prof = profile(tmp_path, size, tol)
    devices = sorted(tables["forward"]["device"])
    result = match(tables, devices, prof, accuracy={})
    volts = recheck_voltages(tables, devices)
    assert result.summary["sets"] == milp_optimum(volts, size, tol)
    assert result.summary["sets"] > 0
    for _, members in result.sets.groupby("set")["device"]:
        assert len(members) == size
        v = recheck_voltages(tables, list(members))
        assert (v.max(axis=0) - v.min(axis=0) <= tol * (1 + 1e-9)).all()
    # Accounting: every part in exactly one of the two tables.
    placed = list(result.sets["device"])
    assert len(placed) == len(set(placed))
    assert set(placed).isdisjoint(result.unmatched["device"])
    assert set(placed) | set(result.unmatched["device"]) == set(devices)


def test_guard_band_shrinks_the_tolerance(tmp_path):
    tables = tight_batch()
    devices = sorted(tables["forward"]["device"])
    acc = {"voltage": {"gain": 1e-4, "offset_V": 1e-4}}
    guarded = match(tables, devices, profile(tmp_path, 2, 1.5e-3, "accuracy"), acc)
    plain = match(tables, devices, profile(tmp_path, 2, 1.5e-3, "none"), acc)
    g = guarded.summary["guard_band"]["forward_voltage_at_1mA"]
    assert 2.5e-4 < g < 2.8e-4          # ±(0.01 % + 100 µV) near 0.6–0.7 V: see test_profiles
    assert guarded.summary["sets"] <= plain.summary["sets"]
    for _, members in guarded.sets.groupby("set")["device"]:
        v = recheck_voltages(tables, list(members))
        assert (v.max(axis=0) - v.min(axis=0) <= 1.5e-3 - 2.5e-4).all()


def test_reasons_for_missing_data_single_points_and_screens(tmp_path):
    tables = tight_batch(12)
    single = pd.DataFrame({"device": ["S1"], "voltage": [0.6], "current": [0.63e-3],
                           "temperature": [T25], "position": [99], "source": ["m"], "line": [2]})
    t, r = fit_forward(single, ForwardSettings(T25, T25, 1.11, 3.0, 0.0))
    tables["forward"] = pd.concat([tables["forward"], t], ignore_index=True)
    tables["forward_readings"] = pd.concat([tables["forward_readings"], r], ignore_index=True)
    devices = sorted(tables["forward"]["device"])
    prof = profile(tmp_path, 2, 5e-3, extra="screen:\n  - {quantity: reverse_current, "
                                             "at_reverse_voltage_V: 20, max_A: 5.0e-8}\n")
    result = match(tables, devices, prof, accuracy={})
    reasons = result.unmatched.set_index("device")["reason"]
    assert "cannot see crossing curves" in reasons["S1"]
    assert all("no leakage data" in reasons[d] for d in devices)
    assert result.summary["sets"] == 0


def test_same_input_same_sets(tmp_path):
    tables = tight_batch()
    devices = sorted(tables["forward"]["device"])
    prof = profile(tmp_path, 4, 2.5e-3)
    a = match(tables, devices, prof, accuracy={})
    b = match(tables, devices, prof, accuracy={})
    pd.testing.assert_frame_equal(a.sets, b.sets)


def test_partners_rank_the_closest_part_first(tmp_path):
    tables = tight_batch()
    devices = sorted(tables["forward"]["device"])
    prof = profile(tmp_path, 2, 1.5e-3)
    table = partner_table(tables, devices, prof, "T000", accuracy={}, top=5)
    volts = recheck_voltages(tables, devices)
    me = volts[0]
    dist = np.abs(volts[1:] - me).sum(axis=1) / 1.5e-3
    assert table["device"].iloc[0] == devices[1 + int(np.argmin(dist))]
    margins = table[[c for c in table.columns if "_margin" in c]].to_numpy()
    assert (table["within"].to_numpy() == (margins >= 0).all(axis=1)).all()


def test_partners_complete_a_set_among_the_available_parts(tmp_path):
    # Reference: spreads re-computed from the voltages of the fitted parameters
    # (physics.forward.voltage_from_current), and the available parts that make a valid
    # trio with the two kept, found by plain numpy on those voltages.
    tables = tight_batch()
    devices = sorted(tables["forward"]["device"])
    prof = profile(tmp_path, 3, 2.5e-3)
    volts = recheck_voltages(tables, devices)
    nearest = 1 + int(np.argmin(np.abs(volts[1:] - volts[0]).max(axis=1)))
    kept = [0, nearest]
    free = [d for i, d in enumerate(devices) if i not in kept][::2]
    table = partner_table(tables, devices, prof, [devices[i] for i in kept], accuracy={},
                          top=50, size=3, available=free)
    trios = [d for d in free if np.all(np.ptp(volts[kept + [devices.index(d)]], axis=0) <= 2.5e-3)]
    assert sorted(table["device"]) == sorted(free)          # every available part, ranked
    assert sorted(table.loc[table["within"], "device"]) == sorted(trios)
    for row in table.itertuples():
        sp = np.ptp(volts[kept + [devices.index(row.device)]], axis=0)
        got = [getattr(row, c) for c in table.columns if c.endswith("_spread_V")]
        np.testing.assert_allclose(got, sp, rtol=1e-6, atol=1e-9)
    assert np.all(np.diff(table["score"]) >= 0) and len(trios) >= 2
    with pytest.raises(InputError, match="no extraction table"):
        partner_table(tables, devices, prof, "T000", accuracy={}, available=["X9"])
    with pytest.raises(InputError, match="twice"):
        partner_table(tables, devices, prof, ["T000", "T000"], accuracy={})


def test_dense_reel_sets_are_valid_and_within_proven_limits():
    # A dense group (far too many valid quads to list): whatever method is used, the sets
    # must be valid and disjoint, and neither their count nor the stated bound may claim
    # more than is possible: disjoint quads hold two disjoint compatible pairs each, so
    # there are at most (maximum matching) / 2 of them (matching by networkx's blossom).
    from kinset.matching.sets import form_sets, is_valid
    rng = np.random.default_rng(11)
    z = rng.normal(size=(120, 3)) * 0.8
    res = form_sets(z, np.ones(3), 4)
    for s in res.sets:
        assert is_valid(z, s) and len(s) == 4
    flat = np.concatenate(res.sets)
    assert len(flat) == len(set(flat))
    g = nx.Graph()
    g.add_nodes_from(range(len(z)))
    g.add_edges_from((a, b) for a, b in itertools.combinations(range(len(z)), 2)
                     if np.max(np.abs(z[a] - z[b])) <= 1)
    limit = len(nx.max_weight_matching(g, maxcardinality=True)) // 2
    assert len(res.sets) <= res.upper_bound
    assert len(res.sets) <= limit
    assert len(res.sets) >= 0.8 * min(res.upper_bound, limit)   # near the bound, not a token effort


def test_a_part_measured_at_one_bias_is_matched_on_its_measured_capacitance(tmp_path):
    """The capacitance points table reaches the matcher: a part with a single C–V point
    (too few biases for a depletion-law fit) serves the profile's bias from that point."""
    from kinset.io.output import write_csv
    from kinset.matching.run import run_match
    from kinset.physics.capacitance import junction_capacitance
    results = tmp_path / "results"
    results.mkdir()
    # A: a fitted law; B: one point at 0 V, 8 fF above A's CJO (inside a 50 fF tolerance)
    write_csv(pd.DataFrame({
        "device": ["A", "B"], "status": ["ok", "warning"],
        "note": ["", "only 1 reverse bias(es): too few for the law"],
        "cj0_F": [1.0e-12, np.nan], "vj_V": [0.7, np.nan], "m": [0.45, np.nan],
        "fit_rms_F": [1e-15, np.nan], "vr_min_V": [0.0, 0.0], "vr_max_V": [5.0, 0.0],
        # the fit's standard errors and correlations, from which A's value gets its u
        "cj0_F_se": [1e-15, np.nan], "vj_V_se": [0.01, np.nan], "m_se": [0.005, np.nan],
        "corr_cj0_vj": [0.9, np.nan], "corr_cj0_m": [0.8, np.nan], "corr_vj_m": [0.95, np.nan]}),
        results / "capacitance.csv")
    write_csv(pd.DataFrame({"device": ["B", "B"], "reverse_voltage_V": [0.0, 2.0],
                            "capacitance_F": [1.008e-12, 0.6e-12], "used": [1, 0]}),
              results / "capacitance_points.csv")
    p = tmp_path / "cap.yaml"
    p.write_text("set_size: 2\nguard_band: none\nmatch:\n"
                 "  - {quantity: capacitance, at_reverse_voltage_V: 0, tolerance_F: 5.0e-14}\n")
    result = run_match(results, str(p), tmp_path / "out")
    values = pd.read_csv(tmp_path / "out" / "values.csv").set_index("device")
    # CJO/(1 + 0/VJ)^M = CJO at 0 V (closed form); B's value is its own point as written
    assert values.loc["A", "capacitance_at_0V"] == pytest.approx(
        junction_capacitance(0.0, 1.0e-12, 0.7, 0.45), rel=1e-12)
    assert values.loc["B", "capacitance_at_0V"] == pytest.approx(1.008e-12, rel=1e-12)
    assert sorted(result.sets["device"]) == ["A", "B"]
    # a point left out of the fit (used = 0) never serves
    p.write_text("set_size: 2\nguard_band: none\nmatch:\n"
                 "  - {quantity: capacitance, at_reverse_voltage_V: 2, tolerance_F: 5.0e-14}\n")
    result = run_match(results, str(p), tmp_path / "out2")
    assert result.sets.empty
    un = pd.read_csv(tmp_path / "out2" / "unmatched.csv").set_index("device")
    assert un.loc["B", "reason_code"] == "no_point" and un.loc["B", "stage"] == "data"
