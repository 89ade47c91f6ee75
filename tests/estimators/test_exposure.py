"""Tests of estimators/exposure.py: graph cluster randomization exposure estimators."""

from __future__ import annotations

import itertools
import math

import networkx as nx
import numpy as np
import pytest
from scipy import sparse
from scipy.special import comb

from spillgauge.errors import DegenerateEstimateWarning
from spillgauge.estimators import (
    exposure_probabilities,
    hajek_exposure,
    horvitz_thompson_cluster,
    horvitz_thompson_exposure,
)
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule

# REFERENCES §1 / checks 1-2 (Ugander et al. 2013, values [CALC]): path 0-1-2-3-4-5
PATH_Y1 = np.array([3, 4, 5, 6, 7, 8])
PATH_Y0 = np.array([1, 1, 2, 2, 3, 3])
PARTIAL = 50  # outcome of a partially exposed user: never used by the estimators


def _exposure_units(graph: nx.Graph, cluster_of_node: np.ndarray) -> sparse.csr_array:
    """Row i marks the clusters of i's closed neighbourhood (built with networkx)."""
    rows, cols = [], []
    for node in sorted(graph.nodes):
        touched = {int(cluster_of_node[j]) for j in [node, *graph.neighbors(node)]}
        rows += [node] * len(touched)
        cols += sorted(touched)
    return sparse.csr_array((np.ones(len(rows)), (rows, cols)),
                            shape=(graph.number_of_nodes(), int(cluster_of_node.max()) + 1))


def _schedule(cluster_of_node, is_treated, units, *, randomization="bernoulli", p=0.5):
    return AssignmentSchedule(unit_of_user=np.asarray(cluster_of_node),
                              is_treated=np.asarray(is_treated, dtype=bool)[:, None],
                              period_start_ticks=[0], n_ticks=1, treated_probability=p,
                              unit_kind="cluster", randomization=randomization,
                              exposure_units=units)


def _world(units, is_treated, y1, y0):
    """Outcomes under full-neighbourhood exposure: Y(1) if all touched clusters are treated."""
    n_treated = units @ np.asarray(is_treated, dtype=float)
    n_touched = np.diff(units.indptr)
    outcome = np.where(n_treated == n_touched, y1, np.where(n_treated == 0, y0, PARTIAL))
    return OutcomePanel.from_arrays(fulfilled=outcome.astype(int))


def _enumerate(graph, clusters, y1, y0, estimator, *, randomization="bernoulli", p=0.5, m=None):
    """Return (weights, points, variances) over every assignment of the clusters."""
    units = _exposure_units(graph, clusters)
    n_clusters = int(clusters.max()) + 1
    if randomization == "bernoulli":
        assignments = [np.array(a) for a in itertools.product([False, True], repeat=n_clusters)]
    else:
        assignments = [np.isin(np.arange(n_clusters), c)
                       for c in itertools.combinations(range(n_clusters), m)]
    weights, points, variances = [], [], []
    for is_treated in assignments:
        n_treated = int(is_treated.sum())
        weights.append(p ** n_treated * (1 - p) ** (n_clusters - n_treated)
                       if randomization == "bernoulli" else 1 / len(assignments))
        est = estimator(_world(units, is_treated, y1, y0),
                        _schedule(clusters, is_treated, units, randomization=randomization, p=p))
        points.append(est.point)
        variances.append(est.standard_error ** 2)
    return np.array(weights), np.array(points), np.array(variances)


def _moments(weights, values):
    mean = float(np.dot(weights, values))
    return mean, float(np.dot(weights, (values - mean) ** 2))


def _closed_form_variance(touched: list[set], y1, y0, p) -> float:
    # REFERENCES §1 exact variance of the GCR HT estimator (Ugander et al. 2013, [CALC]):
    # V1 + V0 - 2C over pairs, written out independently of the module's implementation
    n = len(touched)
    v1 = v0 = cov = 0.0
    for i in range(n):
        for j in range(n):
            shared = len(touched[i] & touched[j])
            if i == j:
                v1 += y1[i] ** 2 * (p ** -len(touched[i]) - 1)
                v0 += y0[i] ** 2 * ((1 - p) ** -len(touched[i]) - 1)
            else:
                v1 += y1[i] * y1[j] * (p ** -shared - 1)
                v0 += y0[i] * y0[j] * ((1 - p) ** -shared - 1)
            if shared:
                cov -= y1[i] * y0[j]
    return (v1 + v0 - 2 * cov) / n ** 2


def test_path_graph_exposure_probabilities():
    # REFERENCES check 1: |S_i| = (1,2,2,2,2,1), P(full treatment) = (.5,.25,.25,.25,.25,.5)
    clusters = np.array([0, 0, 1, 1, 2, 2])
    units = _exposure_units(nx.path_graph(6), clusters)
    assert np.diff(units.indptr).tolist() == [1, 2, 2, 2, 2, 1]
    pi1, pi0 = exposure_probabilities(_schedule(clusters, [1, 0, 1], units))
    assert pi1.tolist() == [0.5, 0.25, 0.25, 0.25, 0.25, 0.5]
    assert pi0.tolist() == [0.5, 0.25, 0.25, 0.25, 0.25, 0.5]


def test_node_level_probability_is_p_to_degree_plus_one():
    # REFERENCES check 1: node-level Bernoulli gives p^(d+1); d = 10 -> 4.8828125e-4
    graph = nx.star_graph(10)
    singletons = np.arange(11)
    units = _exposure_units(graph, singletons)
    pi1, _ = exposure_probabilities(_schedule(singletons, np.zeros(11), units))
    assert pi1[0] == 4.8828125e-4
    assert np.all(pi1[1:] == 0.25)


def test_gcr_horvitz_thompson_by_enumeration_of_8_cluster_assignments():
    # REFERENCES check 2 [CALC]: E[HT] = GATE = 3.5 and Var = 58.25 over the 8 assignments,
    # equal to the §1 closed form; the documented Aronow-Samii (2017) variance estimate is
    # conservative: E[V-hat] >= Var.
    graph, clusters = nx.path_graph(6), np.array([0, 0, 1, 1, 2, 2])
    weights, points, variances = _enumerate(graph, clusters, PATH_Y1, PATH_Y0,
                                            horvitz_thompson_exposure)
    mean, variance = _moments(weights, points)
    assert mean == pytest.approx(3.5, abs=1e-10)
    assert variance == pytest.approx(58.25, abs=1e-10)
    touched = [{0}, {0, 1}, {0, 1}, {1, 2}, {1, 2}, {2}]
    assert variance == pytest.approx(_closed_form_variance(touched, PATH_Y1, PATH_Y0, 0.5),
                                     abs=1e-10)
    assert np.dot(weights, variances) >= variance


def test_node_level_horvitz_thompson_by_enumeration_of_64_assignments():
    # REFERENCES check 2 [CALC]: node-level Bernoulli on the same graph: E = 3.5,
    # Var = 88.527778 (> 58.25 of the cluster design); E[V-hat] >= Var (Aronow & Samii 2017)
    graph, singletons = nx.path_graph(6), np.arange(6)
    weights, points, variances = _enumerate(graph, singletons, PATH_Y1, PATH_Y0,
                                            horvitz_thompson_exposure)
    mean, variance = _moments(weights, points)
    assert mean == pytest.approx(3.5, abs=1e-10)
    assert variance == pytest.approx(88.527778, abs=5e-7)
    touched = [set(range(max(i - 1, 0), min(i + 2, 6))) for i in range(6)]
    assert variance == pytest.approx(_closed_form_variance(touched, PATH_Y1, PATH_Y0, 0.5),
                                     abs=1e-10)
    assert variance > 58.25
    assert np.dot(weights, variances) >= variance


def _random_clustered_graph(seed: int) -> tuple[nx.Graph, np.ndarray]:
    # 24 nodes in 8 blocks of 3, a few edges between neighbouring blocks, so k_i <= 3
    graph = nx.Graph()
    graph.add_nodes_from(range(24))
    rng = np.random.default_rng(seed)
    clusters = np.repeat(np.arange(8), 3)
    for block in range(8):
        members = range(3 * block, 3 * block + 3)
        graph.add_edges_from(itertools.combinations(members, 2))
        start, end = 3 * block + int(rng.integers(3)), 3 * block + 3 + int(rng.integers(3))
        graph.add_edge(start, end % 24)
    return graph, clusters


def test_complete_randomization_probabilities_match_comb_and_enumeration():
    # hypergeometric: P(all k clusters treated) = C(G-k, m-k)/C(G, m), all in control
    # C(G-k, m)/C(G, m) (scipy.special.comb), and the share of the C(8, 3) = 56 assignments
    # in which each user is exposed
    graph, clusters = _random_clustered_graph(3)
    units = _exposure_units(graph, clusters)
    n_touched = np.diff(units.indptr)
    assert n_touched.max() >= 2
    g, m = 8, 3
    pi1, pi0 = exposure_probabilities(_schedule(clusters, np.arange(8) < m, units,
                                                randomization="complete"))
    assert pi1 == pytest.approx(comb(g - n_touched, m - n_touched) / comb(g, m), abs=1e-14)
    assert pi0 == pytest.approx(comb(g - n_touched, m) / comb(g, m), abs=1e-14)
    exposed1 = np.zeros(24)
    exposed0 = np.zeros(24)
    for treated in itertools.combinations(range(g), m):
        n_treated = units @ np.isin(np.arange(g), treated).astype(float)
        exposed1 += n_treated == n_touched
        exposed0 += n_treated == 0
    assert pi1 == pytest.approx(exposed1 / comb(g, m, exact=True), abs=1e-14)
    assert pi0 == pytest.approx(exposed0 / comb(g, m, exact=True), abs=1e-14)


def test_bernoulli_probabilities_monte_carlo():
    # REFERENCES check 1: Monte Carlo over 10^5 cluster draws within 4 SE of p^k
    graph, clusters = _random_clustered_graph(4)
    units = _exposure_units(graph, clusters)
    rng = np.random.default_rng(1305)
    draws = rng.random((100_000, 8)) < 0.4
    frequency = ((units @ draws.T.astype(float)) == np.diff(units.indptr)[:, None]).mean(axis=1)
    pi1, _ = exposure_probabilities(_schedule(clusters, np.zeros(8), units, p=0.4))
    assert np.all(np.abs(frequency - pi1) <= 4 * np.sqrt(pi1 * (1 - pi1) / 100_000))


def test_complete_randomization_horvitz_thompson_by_enumeration():
    # Horvitz-Thompson with exact hypergeometric probabilities is unbiased (Aronow & Samii
    # 2017); the documented variance estimate is conservative for non-negative outcomes.
    graph, clusters = _random_clustered_graph(5)
    rng = np.random.default_rng(6)
    y0 = rng.integers(0, 6, size=24)
    y1 = y0 + rng.integers(0, 4, size=24)
    weights, points, variances = _enumerate(graph, clusters, y1, y0, horvitz_thompson_exposure,
                                            randomization="complete", m=4)
    mean, variance = _moments(weights, points)
    assert mean == pytest.approx(np.mean(y1 - y0), abs=1e-10)
    assert np.dot(weights, variances) >= variance


def test_users_with_zero_probability_are_left_out_with_a_warning():
    # complete randomization of m = 1 of 3 clusters: users touching 2 clusters can never be
    # fully treated, so only users 0 and 5 (k = 1) remain
    clusters = np.array([0, 0, 1, 1, 2, 2])
    units = _exposure_units(nx.path_graph(6), clusters)
    panel = OutcomePanel.from_arrays(fulfilled=np.array([3, 4, 5, 6, 7, 2]))
    schedule = _schedule(clusters, [1, 0, 0], units, randomization="complete")
    with pytest.warns(DegenerateEstimateWarning, match="4 users"):
        est = horvitz_thompson_exposure(panel, schedule)
    # by hand: pi1 = 1/3 for user 0, pi0 = 2/3 for user 5: (3 * 3 - 2 * 1.5) / 2
    assert est.point == pytest.approx(3.0, abs=1e-12) and est.n_units == 2


def test_without_cross_cluster_edges_exposure_ht_equals_cluster_ht():
    # when every neighbourhood stays inside its own cluster, k_i = 1 and the exposure HT is
    # the cluster HT (same formula, by definition)
    clusters = np.repeat(np.arange(4), [2, 3, 1, 2])
    units = sparse.csr_array((np.ones(8), (np.arange(8), clusters)), shape=(8, 4))
    panel = OutcomePanel.from_arrays(fulfilled=np.array([3, 1, 4, 1, 5, 9, 2, 6]))
    for randomization in ("bernoulli", "complete"):
        schedule = _schedule(clusters, [1, 0, 1, 0], units, randomization=randomization, p=0.5)
        assert horvitz_thompson_exposure(panel, schedule).point == pytest.approx(
            horvitz_thompson_cluster(panel, schedule).point, abs=1e-12)


def test_hajek_is_the_weighted_difference_and_location_invariant():
    # Aronow & Samii (2017) Hajek form: inverse-probability-weighted means (numpy.average)
    graph, clusters = _random_clustered_graph(7)
    units = _exposure_units(graph, clusters)
    rng = np.random.default_rng(8)
    outcome = rng.integers(0, 9, size=24)
    is_treated = np.isin(np.arange(8), [0, 1, 2, 5])
    schedule = _schedule(clusters, is_treated, units, p=0.5)
    est = hajek_exposure(OutcomePanel.from_arrays(fulfilled=outcome), schedule)
    pi1, pi0 = exposure_probabilities(schedule)
    n_treated = units @ is_treated.astype(float)
    e1, e0 = n_treated == np.diff(units.indptr), n_treated == 0
    expected = (np.average(outcome[e1], weights=1 / pi1[e1])
                - np.average(outcome[e0], weights=1 / pi0[e0]))
    assert est.point == pytest.approx(expected, abs=1e-12)
    shifted = hajek_exposure(OutcomePanel.from_arrays(fulfilled=outcome + 7), schedule)
    assert shifted.point == pytest.approx(est.point, abs=1e-12)
    assert shifted.standard_error == pytest.approx(est.standard_error, rel=1e-10)


def test_hajek_recovers_constant_effect_in_every_assignment():
    # Y(1) = c1, Y(0) = c0 for everyone: the Hajek point is c1 - c0 exactly whenever both
    # exposures occur (ratio of weighted means of constants)
    graph, clusters = nx.path_graph(6), np.array([0, 0, 1, 1, 2, 2])
    units = _exposure_units(graph, clusters)
    n_checked = 0
    for arms in itertools.product([False, True], repeat=3):
        n_treated = units @ np.array(arms, dtype=float)
        if not (np.any(n_treated == np.diff(units.indptr)) and np.any(n_treated == 0)):
            continue
        panel = _world(units, np.array(arms), np.full(6, 7), np.full(6, 2))
        est = hajek_exposure(panel, _schedule(clusters, arms, units))
        assert est.point == pytest.approx(5.0, abs=1e-12)
        n_checked += 1
    assert n_checked == 4  # (0,0,1), (0,1,1), (1,0,0), (1,1,0), by hand


def test_hajek_with_one_exposure_empty_returns_nan():
    clusters = np.array([0, 0, 1, 1, 2, 2])
    units = _exposure_units(nx.path_graph(6), clusters)
    with pytest.warns(DegenerateEstimateWarning, match="two exposures"):
        est = hajek_exposure(OutcomePanel.from_arrays(fulfilled=np.arange(6)),
                             _schedule(clusters, [1, 1, 1], units))
    assert math.isnan(est.point)


def test_exposure_inputs_are_validated():
    clusters = np.array([0, 0, 1, 1, 2, 2])
    panel = OutcomePanel.from_arrays(fulfilled=np.arange(6))
    with pytest.raises(ValueError, match="exposure_units"):
        horvitz_thompson_exposure(panel, _schedule(clusters, [1, 0, 1], None))
    wrong_shape = sparse.csr_array(np.ones((6, 2)))
    with pytest.raises(ValueError, match="shape"):
        exposure_probabilities(_schedule(clusters, [1, 0, 1], wrong_shape))
    empty_row = sparse.csr_array(np.eye(6, 3))
    with pytest.raises(ValueError, match="user 3 has none"):
        exposure_probabilities(_schedule(clusters, [1, 0, 1], empty_row))
    units = _exposure_units(nx.path_graph(6), clusters)
    with pytest.raises(ValueError, match="treated_probability"):
        exposure_probabilities(_schedule(clusters, [1, 0, 1], units, p=1.0))
