"""Tests of estimators/_inference.py's CR2 arithmetic without dense Gram matrices."""

from __future__ import annotations

import numpy as np
import pytest

from spillgauge.estimators._inference import cr2_arm_difference


def _dense_cr2(residual_sums, sizes, is_treated):
    # the previous code: each arm's (G_a, G_a) Gram matrix K = diag(N) - N N' / N_a, and
    # Bell & McCaffrey's (2002) df = tr(W K)^2 / sum (w w' * K^2)
    variance = trace = trace_square = 0.0
    for arm in (is_treated, ~is_treated):
        n_g = sizes[arm].astype(float)
        n_a = n_g.sum()
        weight = 1.0 / ((1.0 - n_g / n_a) * n_a ** 2)
        variance += np.sum(weight * residual_sums[arm] ** 2)
        gram = np.diag(n_g) - np.outer(n_g, n_g) / n_a
        trace += np.sum(weight * np.diag(gram))
        trace_square += np.sum(np.outer(weight, weight) * gram ** 2)
    return variance, trace ** 2 / trace_square


@pytest.mark.parametrize("seed", range(5))
def test_cr2_equals_the_dense_gram_formula(seed):
    rng = np.random.default_rng(seed)
    n_clusters = int(rng.integers(4, 40))
    sizes = rng.integers(1, 50, n_clusters).astype(float)
    is_treated = rng.permutation(np.arange(n_clusters) < n_clusters // 2)
    residual_sums = rng.normal(size=n_clusters) * sizes
    got = cr2_arm_difference(residual_sums, sizes, is_treated)
    assert got == pytest.approx(_dense_cr2(residual_sums, sizes, is_treated), rel=1e-12)


def test_cr2_of_many_clusters_needs_no_gram_matrix():
    # 200,000 clusters: the dense Gram matrices would take 2 x 80 GB; the sums take O(G).
    # Equal clusters: each arm's factor G_a / (G_a - 1) and df = G - 2 (Imbens & Kolesar
    # 2016, the balanced case).
    n_clusters = 200_000
    sizes = np.full(n_clusters, 3.0)
    is_treated = np.arange(n_clusters) % 2 == 0
    residual_sums = np.random.default_rng(0).normal(size=n_clusters)
    variance, df = cr2_arm_difference(residual_sums, sizes, is_treated)
    half = n_clusters // 2
    want = sum(np.sum(residual_sums[arm] ** 2) * half / (half - 1) / (3.0 * half) ** 2
               for arm in (is_treated, ~is_treated))
    assert variance == pytest.approx(want, rel=1e-12)
    assert df == pytest.approx(n_clusters - 2, rel=1e-9)
