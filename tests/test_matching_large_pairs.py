"""Pairs on components too large for one blossom call, and the fractional matching bound.

Outside references, named beside each check:
* closed forms of the fractional matching number nu_f of small graphs (a triangle 3/2,
  a star 1, a 5-cycle 5/2, two triangles joined by an edge 3: Schrijver, *Combinatorial
  Optimization*, ch. 30, from memory: nu_f of an odd cycle is half its length);
* the fractional matching LP max 1'x, x(delta(v)) <= 1, x >= 0 solved by HiGHS
  (scipy.optimize.linprog), formulated here from scratch;
* networkx.max_weight_matching(maxcardinality=True) (Edmonds' blossom, pure Python) for
  the largest number of pairs;
* brute force over every subset of pairs on tiny graphs.
"""

import itertools

import networkx as nx
import numpy as np
import pytest
from scipy.optimize import linprog
from scipy.sparse import csc_matrix

import kinset.matching.sets as sets_module
from kinset.matching.packing import fractional_matching_bound
from kinset.matching.sets import form_sets


def nu_f_by_lp(n, pairs):
    """Fractional matching number by HiGHS (linprog), from the degree constraints."""
    m = len(pairs)
    a = csc_matrix((np.ones(2 * m), (pairs.ravel(), np.repeat(np.arange(m), 2))), shape=(n, m))
    r = linprog(-np.ones(m), A_ub=a, b_ub=np.ones(n), bounds=(0, None), method="highs")
    assert r.status == 0
    return -r.fun


def max_matching_brute_force(n, pairs):
    """Largest set of pairwise disjoint edges, by trying every subset (tiny graphs)."""
    for size in range(n // 2, 0, -1):
        for choice in itertools.combinations(range(len(pairs)), size):
            if len(np.unique(pairs[list(choice)])) == 2 * size:
                return size
    return 0


@pytest.mark.parametrize("n, edges, nu_f", [
    (3, [(0, 1), (1, 2), (0, 2)], 1.5),                                      # triangle
    (4, [(0, 1), (0, 2), (0, 3)], 1.0),                                      # star
    (5, [(0, 1), (1, 2), (2, 3), (3, 4), (0, 4)], 2.5),                      # 5-cycle
    (6, [(0, 1), (1, 2), (0, 2), (3, 4), (4, 5), (3, 5), (2, 3)], 3.0),      # two triangles
])
def test_fractional_bound_closed_forms(n, edges, nu_f):
    # Reference: closed forms (module docstring) and the LP by HiGHS.
    pairs = np.array(edges)
    assert fractional_matching_bound(n, pairs) == int(np.floor(nu_f))
    assert nu_f_by_lp(n, pairs) == pytest.approx(nu_f, abs=1e-9)
    # Reference: brute force. The bound holds; odd cycles make nu_f exceed nu.
    assert max_matching_brute_force(n, pairs) <= fractional_matching_bound(n, pairs)


def test_fractional_bound_random_graphs_against_lp_and_networkx():
    rng = np.random.default_rng(11)
    for n, p in ((30, 0.08), (40, 0.05), (25, 0.2)):
        i, j = np.triu_indices(n, 1)
        keep = rng.random(len(i)) < p
        pairs = np.column_stack([i[keep], j[keep]])
        bound = fractional_matching_bound(n, pairs)
        # Reference: HiGHS LP of the fractional matching polytope (optimum half-integral).
        assert bound == int(np.floor(nu_f_by_lp(n, pairs) + 1e-9))
        g = nx.Graph()
        g.add_nodes_from(range(n))
        g.add_edges_from(map(tuple, pairs))
        # Reference: networkx's maximum-cardinality matching never exceeds the bound.
        assert len(nx.max_weight_matching(g, maxcardinality=True)) <= bound


def geometric_reel(n, seed, spread):
    rng = np.random.default_rng(seed)
    z = rng.normal(size=(n, 2))
    return np.column_stack([z[:, 0], z @ [0.5, 1.0], z[:, 1] + 0.3 * rng.normal(size=n)]) / spread


def test_large_component_path_against_networkx(monkeypatch):
    # Blocks of 40 devices on a 240-device component stand in for the 20,000-device
    # limit of a reel. Reference: networkx's maximum-cardinality matching of the same
    # compatibility graph (brute-force Chebyshev distances).
    monkeypatch.setattr(sets_module, "BLOSSOM_MAX_DEVICES", 50)
    monkeypatch.setattr(sets_module, "BLOCK_DEVICES", 40)
    v = geometric_reel(240, 5, 0.35)
    w = np.array([1.0, 0.5, 0.25])
    r = form_sets(v, w, 2)
    members = np.concatenate(r.sets)
    assert len(np.unique(members)) == len(members)                           # disjoint
    assert np.all(np.abs(v[[s[0] for s in r.sets]] - v[[s[1] for s in r.sets]]).max(axis=1)
                  <= 1 + 1e-12)                                              # valid
    cheb = np.abs(v[:, None, :] - v[None, :, :]).max(axis=2)
    i, j = np.nonzero(np.triu(cheb <= 1 + 1e-12, 1))
    g = nx.Graph()
    g.add_edges_from(zip(i.tolist(), j.tolist()))
    best = len(nx.max_weight_matching(g, maxcardinality=True))
    assert r.count <= best <= r.upper_bound
    assert r.count >= 0.98 * r.upper_bound
    assert r.optimal == (r.count == r.upper_bound) and not r.cost_optimal
    assert "blocks of up to 40 devices" in r.method and "fractional matching bound" in r.method
    # Below the limit the same reel is matched exactly, as before (networkx's count).
    monkeypatch.setattr(sets_module, "BLOSSOM_MAX_DEVICES", 10_000)
    exact = form_sets(v, w, 2)
    assert exact.count == best and exact.cost_optimal
    assert exact.total_cost <= r.total_cost + 1e-9


def dense_reference(v):
    """Reference for a dense reel: networkx's maximum matching of the whole compatibility
    graph (brute-force Chebyshev distances), and the mean number of partners."""
    cheb = np.abs(v[:, None, :] - v[None, :, :]).max(axis=2)
    i, j = np.nonzero(np.triu(cheb <= 1 + 1e-12, 1))
    g = nx.Graph()
    g.add_edges_from(zip(i.tolist(), j.tolist()))
    return len(nx.max_weight_matching(g, maxcardinality=True)), 2 * len(i) / len(v)


@pytest.mark.parametrize("blocks", [40, 10])
def test_dense_reel_pairs_in_blocks_reach_the_whole_graphs_matching(monkeypatch, blocks):
    # A dense reel (every device has many partners) is thinned to nearest partners and,
    # from BLOCK_DEVICES devices on, paired in blocks. Reference: networkx's maximum
    # matching of the whole compatibility graph.
    v = geometric_reel(240, 7, 1.5)
    best, mean = dense_reference(v)
    monkeypatch.setattr(sets_module, "DENSE_MEAN_PARTNERS", mean / 2)
    monkeypatch.setattr(sets_module, "BLOCK_DEVICES", blocks)
    r = form_sets(v, np.array([1.0, 0.5, 0.25]), 2)
    members = np.concatenate(r.sets)
    assert len(np.unique(members)) == len(members)
    assert "dense reel" in r.method and f"blocks of up to {blocks} devices" in r.method
    assert r.count == best == r.upper_bound and r.optimal and not r.cost_optimal


def test_dense_reel_blocks_that_fall_short_give_way_to_the_whole_blossom(monkeypatch):
    # Blocks that leave a pair unformed (the repair made to drop one) must not lower the
    # count: the whole thinned graph goes to the blossom algorithm. Reference: networkx.
    v = geometric_reel(240, 7, 1.5)
    best, mean = dense_reference(v)
    monkeypatch.setattr(sets_module, "DENSE_MEAN_PARTNERS", mean / 2)
    monkeypatch.setattr(sets_module, "BLOCK_DEVICES", 40)
    repair = sets_module._repair
    monkeypatch.setattr(sets_module, "_repair", lambda *a: repair(*a)[1:])
    r = form_sets(v, np.array([1.0, 0.5, 0.25]), 2)
    assert r.method.startswith("exact: blossom matching (1 part")
    assert r.count == best == r.upper_bound
