"""Set forming (kinset.matching) against independent references.

References used, named beside each check:
* the set-packing optimum, formulated here from scratch: valid sets found by
  itertools over a brute-force Chebyshev distance matrix, packed by scipy.optimize.milp;
* networkx's blossom implementation (max_weight_matching) for pairs;
* plain numpy re-computation of every spread for validity;
* hand-worked examples for the small helpers.
"""

import itertools

import networkx as nx
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy.optimize import Bounds, LinearConstraint, linprog, milp
from scipy.sparse import csc_matrix

from kinset.matching.heuristics import sort_and_group
from kinset.matching.partners import best_partners
from kinset.matching.sets import form_sets, is_valid, set_cost
from kinset.physics.forward import voltage_from_current

T25 = 298.15


# ------------------------------------------------------------------ references


def valid_sets_bruteforce(values, k):
    """Every valid k-set: itertools over each device's higher-index neighbours."""
    v = np.asarray(values, float)
    n = len(v)
    cheb = np.abs(v[:, None, :] - v[None, :, :]).max(axis=2)
    out = []
    for i in range(n):
        higher = [j for j in range(i + 1, n) if cheb[i, j] <= 1 + 1e-12]
        for rest in itertools.combinations(higher, k - 1):
            s = (i,) + rest
            box = v[list(s)]
            if np.all(box.max(axis=0) - box.min(axis=0) <= 1 + 1e-12):
                out.append(s)
    return np.array(out, dtype=int).reshape(-1, k)


def milp_optimum(values, k):
    """Largest number of disjoint valid sets: set packing solved by scipy.optimize.milp."""
    cands = valid_sets_bruteforce(values, k)
    if len(cands) == 0:
        return 0
    n, m = len(values), len(cands)
    a = csc_matrix((np.ones(m * k), (cands.ravel(), np.repeat(np.arange(m), k))), shape=(n, m))
    r = milp(-np.ones(m), constraints=LinearConstraint(a, -np.inf, 1), integrality=np.ones(m),
             bounds=Bounds(0, 1))
    assert r.status == 0
    return int(round(-r.fun))


def check_valid(values, result, n):
    """Independent re-check: in range, sorted, disjoint, every spread within 1."""
    seen = set()
    for s in result.sets:
        assert s.dtype.kind == "i" and np.all(np.diff(s) > 0)
        assert 0 <= s.min() and s.max() < n
        assert len(s) == result.size
        assert not seen & set(s.tolist())
        seen |= set(s.tolist())
        box = np.asarray(values)[s]
        assert np.all(box.max(axis=0) - box.min(axis=0) <= 1 + 1e-12)
    assert result.upper_bound >= len(result.sets)
    assert result.optimal == (result.upper_bound == len(result.sets))


def clustered_reel(n, seed, dims=3, factors=2, degree=6.0):
    """A few correlated criteria from a latent factor model, scaled to ~degree neighbours."""
    rng = np.random.default_rng(seed)
    loads = rng.normal(0, 1, (dims, factors))
    v = rng.normal(0, 1, (n, factors)) @ loads.T + rng.normal(0, 0.3, (n, dims))
    # tolerance scale: the (degree * n)-th smallest directed Chebyshev distance
    cheb = np.abs(v[:, None, :] - v[None, :, :]).max(axis=2)
    d = np.sort(cheb[np.triu_indices(n, 1)])
    return v / d[min(len(d) - 1, int(degree * n / 2))]


# ---------------------------------------------------------------- optimality


@pytest.mark.parametrize("k", [2, 3, 4])
@pytest.mark.parametrize("seed,n", [(1, 30), (2, 55), (3, 80)])
def test_count_equals_milp_optimum(k, seed, n):
    # Reference: the set-packing MILP formulated independently above.
    v = clustered_reel(n, seed)
    w = np.array([1.0, 0.5, 2.0])
    best = milp_optimum(v, k)
    r = form_sets(v, w, k)
    check_valid(v, r, n)
    assert len(r.sets) == best
    assert r.optimal and r.upper_bound == best
    assert r.method.startswith("exact")
    # The heuristic path on the same reel: its bound must hold and its count cannot
    # exceed the optimum (reference: the same MILP).
    h = form_sets(v, w, k, exact_limit=0)
    check_valid(v, h, n)
    assert len(h.sets) <= best <= h.upper_bound


def test_heuristic_path_reaches_optimum_on_a_larger_reel():
    # Reference: the independent MILP; 150 parts, quads, forced onto the heuristic.
    v = clustered_reel(150, 11, degree=8.0)
    best = milp_optimum(v, 4)
    h = form_sets(v, np.ones(3), 4, exact_limit=0)
    check_valid(v, h, 150)
    assert best <= h.upper_bound
    assert len(h.sets) >= best - 1


def test_triangle_cuts_tighten_the_bound_but_never_below_the_optimum():
    # References: the plain relaxation by scipy.optimize.linprog (HiGHS) and the
    # optimum by the independent MILP. A reel of 200 parts with 7 correlated criteria
    # whose relaxation is fractional (40.25 sets): triangle cuts [Padberg 1973, odd
    # cycles of the set-packing polytope] must bring the proven bound below floor(40.25)
    # yet not below what HiGHS can pack, and the heuristic must reach that.
    rng = np.random.default_rng(2)
    loadings = rng.normal(0.0, 1.0, (7, 3))
    v = rng.normal(0.0, 1.0, (200, 3)) @ loadings.T + rng.normal(0.0, 0.3, (200, 7))
    v /= v.std(axis=0)
    cheb = np.abs(v[:, None, :] - v[None, :, :]).max(axis=2)
    v /= np.sort(cheb[np.triu_indices(200, 1)])[15 * 200 // 2]      # 15 neighbours each
    cands = valid_sets_bruteforce(v, 4)
    m = len(cands)
    a = csc_matrix((np.ones(4 * m), (cands.ravel(), np.repeat(np.arange(m), 4))), shape=(200, m))
    relaxed = -linprog(-np.ones(m), A_ub=a, b_ub=np.ones(200), bounds=(0, None),
                       method="highs").fun
    best = milp_optimum(v, 4)
    h = form_sets(v, np.ones(7), 4, exact_limit=0)
    check_valid(v, h, 200)
    assert "triangle cuts" in h.method
    assert best <= h.upper_bound < np.floor(relaxed + 1e-9)
    assert len(h.sets) == best


def test_pairs_agree_with_networkx_blossom():
    # Reference library: networkx.max_weight_matching (Edmonds' blossom, pure Python).
    rng = np.random.default_rng(3)
    n = 1200
    z = rng.normal(size=(n, 2))
    raw = np.column_stack([z @ [1, 0.5] + 0.2 * rng.normal(size=n),
                           z @ [0.3, 1] + 0.2 * rng.normal(size=n),
                           0.8 * z[:, 0] + 0.3 * rng.normal(size=n)])
    w = np.array([1.0, 0.5, 0.25])
    for scale, weighted in ((0.3, False), (0.2, True)):
        v = raw / scale
        r = form_sets(v, w, 2)
        check_valid(v, r, n)
        g = nx.Graph()
        g.add_nodes_from(range(n))
        cheb = np.abs(v[:, None, :] - v[None, :, :]).max(axis=2)
        i, j = np.nonzero(np.triu(cheb <= 1 + 1e-12, 1))
        cost = np.abs(v[i] - v[j]) @ w
        top = cost.max() + 1.0
        g.add_weighted_edges_from(zip(i.tolist(), j.tolist(), (top - cost).tolist()))
        if weighted:
            # same cardinality and the same least total cost among maximum matchings
            m = nx.max_weight_matching(g, maxcardinality=True)
            assert len(r.sets) == len(m)
            assert r.total_cost == pytest.approx(sum(top - g[a][b]["weight"] for a, b in m),
                                                 rel=1e-9)
        else:
            m = nx.max_weight_matching(g, maxcardinality=True, weight=None)
            assert len(r.sets) == len(m)
        assert r.optimal and r.cost_optimal


# ------------------------------------------------------------- determinism


def test_same_input_same_output_and_row_order_does_not_matter():
    v = clustered_reel(120, 5, degree=8.0)
    w = np.array([1.0, 1.0, 0.5])
    for k, limit in ((2, 5000), (4, 5000), (4, 0)):
        a = form_sets(v, w, k, exact_limit=limit)
        b = form_sets(v, w, k, exact_limit=limit)
        assert [s.tolist() for s in a.sets] == [s.tolist() for s in b.sets]
        assert np.array_equal(a.cost, b.cost) and a.method == b.method
        assert a.upper_bound == b.upper_bound
        perm = np.random.default_rng(0).permutation(len(v))
        c = form_sets(v[perm], w, k, exact_limit=limit)
        assert len(c.sets) == len(a.sets) and c.upper_bound == a.upper_bound
        # distinct values: the canonical order makes even the sets themselves agree
        back = sorted(sorted(perm[s].tolist()) for s in c.sets)
        assert back == sorted(s.tolist() for s in a.sets)


# -------------------------------------------------------------- tight batch


def simulated_batch(n=60, seed=2024):
    """Forward voltage at 10 µA, 100 µA, 1 mA and 10 mA of one batch [V], shape (n, 4)."""
    rng = np.random.default_rng(seed)
    z = rng.normal(size=(n, 2))
    i_s = 2.7e-9 * np.exp(0.15 * z[:, 0])                       # lognormal, ~15 %
    ideality = 1.85 + 0.02 * (0.7 * z[:, 0] + np.sqrt(1 - 0.7 ** 2) * z[:, 1])
    r_s = rng.uniform(0.4, 0.8, n)
    currents = np.array([10e-6, 100e-6, 1e-3, 10e-3])
    return voltage_from_current(currents[None, :], i_s[:, None], ideality[:, None],
                                r_s[:, None], T25)


@pytest.mark.parametrize("k,tolerance", [(2, 1.5e-3), (4, 2.5e-3)])
def test_tight_batch_reaches_optimum_and_beats_sort_and_pair(k, tolerance):
    # Reference: the independent MILP on the same 60 parts; baseline: sort by the
    # voltage at 1 mA and group neighbours that fit (what is done by hand).
    vf = simulated_batch()
    v = vf / tolerance
    r = form_sets(v, np.ones(4), k)
    check_valid(v, r, 60)
    best = milp_optimum(v, k)
    by_hand = sort_and_group(v, k, key=2)
    print(f"\n60 parts, sets of {k} at {tolerance * 1e3:.1f} mV: matcher {len(r.sets)}, "
          f"MILP optimum {best}, sort-and-group {len(by_hand)}")
    assert len(r.sets) == best and r.optimal
    assert best > 0
    assert len(by_hand) <= len(r.sets)


# ----------------------------------------------------------------- properties


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(n=st.integers(0, 14), d=st.integers(1, 3), k=st.integers(2, 4),
       seed=st.integers(0, 2 ** 32 - 1), spread=st.floats(0.5, 4.0))
def test_properties_on_random_small_reels(n, d, k, seed, spread):
    rng = np.random.default_rng(seed)
    v = rng.uniform(0, spread, (n, d))
    w = rng.uniform(0, 1, d)
    most = form_sets(v, w, k)
    tight = form_sets(v, w, k, goal="tightest_sets")
    heur = form_sets(v, w, k, exact_limit=0)
    for r in (most, tight, heur):
        check_valid(v, r, n)
    # always true: the optimum (small reels are solved exactly) is at least any
    # valid packing: the greedy ones and the by-hand one.
    assert most.optimal
    assert len(most.sets) >= len(tight.sets)
    assert len(most.sets) >= len(sort_and_group(v, k))
    assert heur.upper_bound >= len(most.sets) >= len(heur.sets) >= len(tight.sets)
    assert tight.upper_bound >= len(most.sets)
    assert np.all(np.diff(most.cost) >= 0)


# ------------------------------------------------------------------- helpers


def test_cost_and_validity_by_hand():
    # By hand: spreads (1.0, 1.0); cost 1*1.0 + 2*1.0 = 3.0; a hair over 1 is invalid.
    v = np.array([[0.0, 0.0], [0.5, 1.0], [1.0, 0.2], [1.0 + 1e-9, 0.0]])
    assert set_cost(v, [1.0, 2.0], [0, 1, 2]) == pytest.approx(3.0)
    assert is_valid(v, [0, 1, 2])
    assert not is_valid(v, [0, 3])
    assert is_valid(v, [[0, 1], [1, 2]]).tolist() == [True, True]
    assert set_cost(v, [1.0, 2.0], [[0, 1], [1, 2]]).tolist() == pytest.approx([2.5, 2.1])


def test_sort_and_group_by_hand():
    # By hand: sorted 0.0, 1.5, 2.0, 3.2: (0.0, 1.5) does not fit, skip 0.0;
    # (1.5, 2.0) fits; 3.2 is left alone.
    v = np.array([[2.0], [0.0], [3.2], [1.5]])
    assert [s.tolist() for s in sort_and_group(v, 2)] == [[0, 3]]


def test_optimal_pairs_beat_greedy_on_a_path():
    # By hand: points 0, 0.9, 1.8, 2.7 on a line: greedy by cost takes the cheap
    # middle pair (0.9, 1.8) first -> 1 pair; the maximum matching has 2.
    v = np.array([[0.0], [0.9], [1.75], [2.6]])
    assert len(form_sets(v, [1.0], 2).sets) == 2
    assert len(form_sets(v, [1.0], 2, goal="tightest_sets").sets) == 1


def test_best_partners_against_brute_force():
    # Reference: every other device / every pair of others, checked by plain numpy.
    v = clustered_reel(70, 8, degree=10.0)
    w = np.array([1.0, 0.3, 0.6])
    i = 17
    p = best_partners(v, w, i, top=5)
    d = np.abs(v - v[i]).max(axis=1)
    ok = [j for j in range(70) if j != i and d[j] <= 1 + 1e-12]
    ref = sorted(ok, key=lambda j: (np.abs(v[j] - v[i]) @ w, j))[:5]
    assert p.members[:, 0].tolist() == ref
    np.testing.assert_allclose(p.chebyshev, d[ref])
    np.testing.assert_allclose(p.difference, v[ref] - v[i])
    q = best_partners(v, w, i, top=3, size=3)
    trios = [(a, b) for a, b in itertools.combinations(ok, 2) if is_valid(v, [i, a, b])]
    ref3 = sorted(trios, key=lambda t: (set_cost(v, w, [i, *t]), t))[:3]
    assert [tuple(m) for m in q.members.tolist()] == ref3
    assert np.all(np.diff(q.cost) >= 0)
    busy = np.ones(70, bool)
    busy[ref[0]] = False
    assert ref[0] not in best_partners(v, w, i, available=busy).members


def test_completing_a_partial_set_against_brute_force():
    # Reference: every valid quad (itertools over a brute-force Chebyshev matrix) that
    # holds the members kept, ranked by a plain numpy re-computation of its cost.
    v = clustered_reel(70, 8, degree=10.0)
    w = np.array([1.0, 0.3, 0.6])
    quads = valid_sets_bruteforce(v, 4)
    kept = quads[len(quads) // 2][:2].tolist()
    cheb = np.abs(v[:, None, :] - v[None, kept, :]).max(axis=2).max(axis=1)
    assert np.count_nonzero(cheb <= 1 + 1e-12) - 2 <= 60    # every candidate is seen
    ref = []
    for q in quads.tolist():
        if set(kept) <= set(q):
            box = v[q]
            ref.append(((box.max(axis=0) - box.min(axis=0)) @ w, tuple(sorted(set(q) - set(kept)))))
    ref.sort()
    p = best_partners(v, w, kept, top=4, size=4)
    assert [tuple(m) for m in p.members.tolist()] == [t for _, t in ref[:4]]
    np.testing.assert_allclose(p.cost, [c for c, _ in ref[:4]])
    assert p.within.all() and np.all(p.margin.min(axis=1) >= -1e-12)
    # one part to add to three kept: every other part, ranked, with its own validity
    three = quads[0][:3].tolist()
    r = best_partners(v, w, three, top=70, size=4, within_only=False)
    others = [j for j in range(70) if j not in three]
    cost = [set_cost(v, w, three + [j]) for j in others]
    assert r.members[:, 0].tolist() == [others[i] for i in np.lexsort((others, cost))]
    assert r.within.tolist() == [bool(is_valid(v, three + [j])) for j in r.members[:, 0]]
    # rows or a mask of available parts give the same answer
    mask = np.zeros(70, bool)
    mask[others[::2]] = True
    a = best_partners(v, w, three, size=4, available=mask, within_only=False)
    b = best_partners(v, w, three, size=4, available=np.flatnonzero(mask), within_only=False)
    assert a.members.tolist() == b.members.tolist()
    assert set(a.members.ravel()) <= set(others[::2])


@pytest.mark.parametrize("given, size, available", [
    (70, None, None), ([3, 3], None, None), ([], None, None), ([1, 2], 2, None),
    (1, 2, np.ones(5, bool)), (1, 2, [0, 99])])
def test_partner_requests_that_make_no_sense_are_refused(given, size, available):
    v = clustered_reel(70, 8, degree=10.0)
    with pytest.raises(ValueError):
        best_partners(v, np.ones(3), given, size=size, available=available)


def test_dense_component_falls_back_to_a_pool_with_a_size_bound():
    # 40 parts all within tolerance of each other: C(40, 4) = 91,390 valid quads.
    v = np.random.default_rng(4).uniform(0, 0.9, (40, 2))
    r = form_sets(v, np.ones(2), 4, candidate_limit=2000)
    check_valid(v, r, 40)
    assert "nearest partners" in r.method
    assert len(r.sets) == r.upper_bound == 10       # every quad fits: 40 / 4


def test_dense_reel_matched_among_nearest_partners_reaches_networkx_count():
    # Reference library: networkx.max_weight_matching (maximum cardinality) on the
    # *full* compatibility graph of a reel where tolerances are wide against its spread
    # (over 64 partners per device), which kinset matches among nearest partners only.
    rng = np.random.default_rng(5)
    v = rng.normal(0.0, 1.0, (301, 2)) / 1.2
    g = nx.Graph()
    g.add_nodes_from(range(len(v)))
    cheb = np.abs(v[:, None, :] - v[None, :, :]).max(axis=2)
    i, j = np.nonzero(np.triu(cheb <= 1.0, 1))
    assert 2 * len(i) / len(v) > 64                     # the dense path is taken
    g.add_edges_from(zip(i.tolist(), j.tolist()))
    best = len(nx.max_weight_matching(g, maxcardinality=True))
    r = form_sets(v, np.ones(2), 2)
    check_valid(v, r, len(v))
    assert "nearest compatible partners" in r.method and not r.cost_optimal
    assert len(r.sets) == best and r.upper_bound >= best
    q = form_sets(v, np.ones(2), 4)
    check_valid(v, q, len(v))
    assert len(q.sets) <= q.upper_bound <= len(v) // 4


@pytest.mark.parametrize("seed", [1, 2])
def test_dense_path_bound_is_never_below_the_milp_optimum(monkeypatch, seed):
    # Reference: scipy.optimize.milp (HiGHS) on every valid quad of the *full* reel, found
    # by brute force. The dense path is forced on a small reel (its thresholds lowered),
    # so it sees only 3 nearest partners; its bound counts the devices in some valid quad.
    import kinset.matching.sets as sets_module
    monkeypatch.setattr(sets_module, "DENSE_MEAN_PARTNERS", 2)
    monkeypatch.setattr(sets_module, "DENSE_KEEP", 3)
    rng = np.random.default_rng(seed)
    v = np.vstack([rng.normal(0.0, 1.0, (36, 2)), rng.uniform(3.5, 9.0, (6, 2))])
    r = form_sets(v, np.ones(2), 4)
    check_valid(v, r, len(v))
    assert "nearest compatible partners" in r.method and "belong to some valid set" in r.method
    best = milp_optimum(v, 4)
    assert len(r.sets) <= best <= r.upper_bound
    in_a_quad = np.unique(valid_sets_bruteforce(v, 4).ravel())
    assert r.upper_bound == max(len(r.sets), len(in_a_quad) // 4)


def test_in_some_set_agrees_with_brute_force():
    # Reference: itertools brute force over every k-subset of each device's partners.
    from scipy.spatial import cKDTree
    from kinset.matching.graph import in_some_set
    v = clustered_reel(60, 6, degree=4.0)
    for k in (2, 3, 4):
        members = np.unique(valid_sets_bruteforce(v, k).ravel())
        got = in_some_set(v, cKDTree(v), np.arange(len(v)), k, first=3)
        assert np.flatnonzero(got).tolist() == members.tolist()


def test_degenerate_inputs():
    assert form_sets(np.zeros((0, 2)), [1, 1], 2).sets == []
    r = form_sets(np.array([[0.0], [5.0], [10.0]]), [1.0], 2)
    assert r.sets == [] and r.upper_bound == 0 and r.optimal
    one = form_sets(np.zeros((3, 1)), [1.0], 3)
    assert [s.tolist() for s in one.sets] == [[0, 1, 2]]
    with pytest.raises(ValueError, match="NaN"):
        form_sets(np.array([[0.0], [np.nan]]), [1.0], 2)
    with pytest.raises(ValueError, match="size"):
        form_sets(np.zeros((3, 1)), [1.0], 1)
    with pytest.raises(ValueError, match="non-negative"):
        form_sets(np.zeros((3, 1)), [-1.0], 2)
    with pytest.raises(ValueError, match="goal"):
        form_sets(np.zeros((3, 1)), [1.0], 2, goal="fastest")
