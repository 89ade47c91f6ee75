"""Tests of estimators/switchback.py: the switchback difference and the design helpers."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

from spillgauge.errors import DegenerateEstimateWarning
from spillgauge.estimators import (
    switchback_difference,
    switchback_exposure_probabilities,
    switchback_optimal_points,
)
from spillgauge.panel import OutcomePanel
from spillgauge.schedule import AssignmentSchedule


def _market_schedule(arms, period_ticks: int) -> AssignmentSchedule:
    arms = np.asarray(arms, dtype=bool)
    return AssignmentSchedule(unit_of_user=np.zeros(1, int), is_treated=arms[None, :],
                              period_start_ticks=np.arange(arms.size) * period_ticks,
                              n_ticks=arms.size * period_ticks, treated_probability=0.5,
                              unit_kind="market", randomization="complete")


def _one_user_panel(per_tick: np.ndarray) -> OutcomePanel:
    # one user, one pool, one tick per "day": pool_fulfilled is the per-tick series
    return OutcomePanel.from_arrays(fulfilled=np.asarray(per_tick, dtype=np.int64)[None, :])


@pytest.fixture
def hand_case():
    # one market of 2 users, 4 periods of 2 ticks, arms T C C T; pool totals per tick
    # 4 6 | 2 2 | 0 6 | 8 6
    per_user = np.array([2, 3, 1, 1, 0, 3, 4, 3])
    panel = OutcomePanel.from_arrays(fulfilled=np.stack([per_user, per_user]))
    schedule = AssignmentSchedule(
        unit_of_user=np.zeros(2, int), is_treated=np.array([[1, 0, 0, 1]], bool),
        period_start_ticks=[0, 2, 4, 6], n_ticks=8, treated_probability=0.5,
        unit_kind="market", randomization="complete")
    return panel, schedule


def test_hand_case_without_burn_in(hand_case):
    # by hand: treated rate 24 / 8 user-ticks = 3, control 10 / 8 = 1.25, point 8 * 1.75 = 14;
    # block means 2.5, 3.5 (T) and 1, 1.5 (C): Neyman 0.5/2 + 0.125/2 = 0.3125, times 8^2 = 20
    est = switchback_difference(*hand_case)
    assert est.point == pytest.approx(14.0, abs=1e-12)
    assert est.standard_error ** 2 == pytest.approx(20.0, abs=1e-12)
    assert est.n_units == 4 and est.method == "switchback_difference"


def test_hand_case_with_burn_in(hand_case):
    # by hand: burn-in 1 leaves out position 0 of switched blocks (0: T after the pre-horizon
    # control, 1: C after T, 3: T after C); block 2 repeats C. Per-user outcomes by block
    # (2,3) (1,1) (0,3) (4,3). Position 0: no unswitched treated block, so all treated blocks
    # are used, (2 + 4)/2 = 3; control uses block 2 only, 0. Position 1: treated 3, control
    # (1 + 3)/2 = 2. Four periods have each position: point 4*(3 - 0) + 4*(3 - 2) = 16.
    # Linearization (2 users per block): treated psi = -2, +2; control psi = -2, +2
    # -> V = 2*8 + 2*8 = 32.
    est = switchback_difference(*hand_case, burn_in_ticks=1)
    assert est.point == pytest.approx(16.0, abs=1e-12)
    assert est.standard_error ** 2 == pytest.approx(32.0, abs=1e-12)
    assert est.n_units == 4


def test_burn_in_as_long_as_a_block_keeps_only_unswitched_blocks(hand_case):
    # burn-in 2 covers whole blocks: control keeps only block 2 (unswitched), a single block,
    # so the block-level variance is undefined; treated has no unswitched block and falls
    # back to blocks 0 and 3: point 4*(3 - 0) + 4*(3 - 3) = 12.
    with pytest.warns(DegenerateEstimateWarning, match="single block"):
        est = switchback_difference(*hand_case, burn_in_ticks=2)
    assert est.point == pytest.approx(12.0, abs=1e-12)
    assert math.isnan(est.standard_error)


def test_pool_units_weight_by_users():
    # pool 0 has 1 user, pool 1 has 3; 2 periods of 2 ticks; pool 0 arms T C, pool 1 C T.
    # by hand: treated rate (3 + 1 + 6 + 6) / (2*1 + 2*3) = 2, control (0 + 2 + 3 + 0) / 8
    # = 5/8, point 4 * (2 - 5/8) = 5.5. Treated block residuals 4 - 2*2 = 0 and 12 - 2*6 = 0;
    # control blocks (F, n) = (2, 2), (3, 6): residuals 0.75, -0.75, sum psi^2 = 0.28125.
    # Small-sample factor of the control arm under the block-effect working model (Bell &
    # McCaffrey 2002's unbiasing, worked by hand): lambda = 2/4 per position, control rates
    # 0.75 and 0.5, so the loadings are 0.625 * N = (0.625, 1.875) with squared norm 3.90625,
    # and Q = 0.625 [[0.75, -0.75], [-0.75, 0.75]] gives tr(QQ') = 0.87890625: kappa =
    # 4.4444. V = 4.4444 * 0.28125 = 1.25, SE = 1.118 (the pooled factor 2 gave 0.75; the
    # small pool's block carries a quarter of the arm's users and most of its leverage).
    fulfilled = np.array([[3, 1, 0, 2], [1, 0, 2, 2], [1, 0, 2, 2], [1, 0, 2, 2]])
    pools = np.array([0, 1, 1, 1])
    panel = OutcomePanel.from_arrays(fulfilled=fulfilled, pool_of_user=pools)
    schedule = AssignmentSchedule(unit_of_user=pools, is_treated=np.array([[1, 0], [0, 1]], bool),
                                  period_start_ticks=[0, 2], n_ticks=4, treated_probability=0.5,
                                  unit_kind="pool", randomization="complete")
    est = switchback_difference(panel, schedule)
    assert est.point == pytest.approx(5.5, abs=1e-12)
    assert est.standard_error == pytest.approx(math.sqrt(1.25), abs=1e-12)
    assert est.n_units == 4


def test_equal_blocks_give_the_neyman_se_of_block_means():
    # documented identity: with equal user-ticks per block the SE is Neyman's
    # sqrt(s1^2/B1 + s0^2/B0) on block means (Neyman 1923), times the horizon
    rng = np.random.default_rng(31)
    arms = np.array([1, 0, 0, 1, 1, 0, 1, 0, 1, 1], bool)
    series = rng.poisson(6.0, size=arms.size * 5)
    est = switchback_difference(_one_user_panel(series), _market_schedule(arms, 5))
    means = series.reshape(arms.size, 5).mean(axis=1)
    neyman = np.var(means[arms], ddof=1) / arms.sum() + np.var(means[~arms], ddof=1) / (~arms).sum()
    assert est.standard_error == pytest.approx(50 * math.sqrt(neyman), rel=1e-12)
    assert est.point == pytest.approx(50 * (means[arms].mean() - means[~arms].mean()), rel=1e-12)


N_BLOCKS, BLOCK_TICKS = 6, 3
HORIZON = N_BLOCKS * BLOCK_TICKS


def _carryover_series(arms, mu, delta, order):
    # REFERENCES §3 model: Y_t = mu_t + delta (w_t + ... + w_{t-order}); w = 0 before tick 0
    w = np.repeat(np.asarray(arms, dtype=int), BLOCK_TICKS)
    lagged = sum(np.concatenate((np.zeros(lag, int), w[: w.size - lag]))
                 for lag in range(order + 1))
    return mu + delta * lagged


def _complete_assignments():
    # complete randomization of 3 of 6 equal blocks: all C(6, 3) = 20 assignments
    return [np.isin(np.arange(N_BLOCKS), c) for c in itertools.combinations(range(N_BLOCKS), 3)]


MU = np.random.default_rng(41).integers(10, 31, size=HORIZON)  # arbitrary baseline, >= 10


def test_no_carryover_is_unbiased_under_complete_randomization():
    # derived here: with Y_t = mu_t + delta w_t, equal blocks and B/2 of B treated, each arm
    # holds B/2 * L ticks in every assignment and P(w_t = 1) = 1/2, so E[mean_T - mean_C] =
    # delta exactly for any mu_t; on the GTE scale delta * T
    points = [switchback_difference(_one_user_panel(_carryover_series(a, MU, -1, 0)),
                                    _market_schedule(a, BLOCK_TICKS)).point
              for a in _complete_assignments()]
    assert np.mean(points) == pytest.approx(-1 * HORIZON, abs=1e-10)


def test_carryover_without_burn_in_is_biased_toward_zero():
    # derived here (checked by this enumeration): for Y_t = mu_t + delta (w_t + w_{t-1} +
    # w_{t-2}), complete randomization of B/2 of B blocks of length L >= 2 and no burn-in,
    # E[w_t (2 w_s - 1)] is 1/2 within a block, -1/(2(B-1)) across blocks and 0 before the
    # horizon, so E[point] = delta (3T - 3B - 3): |E| < 3 |delta| T (REFERENCES §3: biased
    # toward the short-run effect)
    delta = -1
    points = [switchback_difference(_one_user_panel(_carryover_series(a, MU, delta, 2)),
                                    _market_schedule(a, BLOCK_TICKS)).point
              for a in _complete_assignments()]
    expected = delta * (3 * HORIZON - 3 * N_BLOCKS - 3)
    assert np.mean(points) == pytest.approx(expected, abs=1e-10)
    assert abs(np.mean(points)) < 3 * abs(delta) * HORIZON


def test_burn_in_of_the_carryover_order_removes_carryover_exactly():
    # derived here: with burn-in >= 2 (the carryover order) and blocks of L >= 3, every used
    # treated tick has all of w_{t-2..t} = 1 and every used control tick all 0 (positions in
    # the burn-in come from unswitched blocks; the pre-horizon counts as control), so the
    # carryover adds exactly 3 delta T to the point in every assignment with an unswitched
    # block in each arm; burn-in 1 is not enough for some assignment
    delta = -1
    gaps = {1: [], 2: []}
    for arms in _complete_assignments():
        previous = np.concatenate([[False], np.asarray(arms, bool)[:-1]])
        same = np.asarray(arms, bool) == previous
        if not (same & np.asarray(arms, bool)).any() or not (same & ~np.asarray(arms, bool)).any():
            continue  # the claim needs an unswitched block in each arm
        schedule = _market_schedule(arms, BLOCK_TICKS)
        for burn_in in gaps:
            with_effect = switchback_difference(
                _one_user_panel(_carryover_series(arms, MU, delta, 2)), schedule,
                burn_in_ticks=burn_in)
            baseline = switchback_difference(_one_user_panel(_carryover_series(arms, MU, 0, 2)),
                                             schedule, burn_in_ticks=burn_in)
            gaps[burn_in].append(with_effect.point - baseline.point)
    assert np.allclose(gaps[2], 3 * delta * HORIZON, rtol=0, atol=1e-10)
    assert not np.allclose(gaps[1], 3 * delta * HORIZON, rtol=0, atol=1e-10)


def test_optimal_points_match_the_book():
    # REFERENCES check 5 (Bojinov, Simchi-Levi & Zhao 2023 via Facure 2023 ch. 10):
    # (T=12, m=2) -> {1,5,7,9}; (T=15, m=3) -> {1,7,10}; (T=120, m=2) -> 58 points; m=0 -> all
    assert switchback_optimal_points(12, 2).tolist() == [1, 5, 7, 9]
    assert switchback_optimal_points(15, 3).tolist() == [1, 7, 10]
    assert switchback_optimal_points(120, 2).size == 58
    assert switchback_optimal_points(5, 0).tolist() == [1, 2, 3, 4, 5]


@pytest.mark.parametrize("n_ticks, m", [(6, 2), (9, 3), (7, 2), (12, -1), (12.0, 2), (True, 1)])
def test_optimal_points_reject_short_or_invalid_horizons(n_ticks, m):
    # REFERENCES check 5: n = T/m < 4 must be rejected; T not a multiple of m is not covered
    with pytest.raises(ValueError):
        switchback_optimal_points(n_ticks, m)


def test_exposure_probabilities_match_the_book():
    # REFERENCES check 6 (Facure 2023 ch. 10 examples, m = 2, p = 1/2)
    nan = float("nan")
    every_three, _ = switchback_exposure_probabilities([1, 4], n_ticks=6, m=2)
    np.testing.assert_array_equal(every_three, [nan, nan, 0.5, 0.25, 0.25, 0.5])
    every_tick, _ = switchback_exposure_probabilities(np.arange(1, 8), n_ticks=7, m=2)
    np.testing.assert_array_equal(every_tick, [nan, nan] + [0.125] * 5)
    points_146, control = switchback_exposure_probabilities([1, 4, 6], n_ticks=7, m=2)
    np.testing.assert_array_equal(points_146, [nan, nan, 0.5, 0.25, 0.25, 0.25, 0.25])
    np.testing.assert_array_equal(control, points_146)  # p = 1/2: both arms alike


@pytest.mark.parametrize("points", [[1, 5, 7, 9], [1, 4, 7, 10], list(range(1, 13))])
def test_horvitz_thompson_with_these_probabilities_is_unbiased(points):
    # REFERENCES check 7 [CALC]: T = 12, m = 2, Y_t = mu_t + delta (w_t + w_{t-1} + w_{t-2}),
    # delta = -1, mu arbitrary: the HT estimator of Bojinov et al. (2023),
    # (T-m)^-1 sum_{t>m} Y_t [1{W=1}/P1 - 1{W=0}/P0], has E = 3 delta = -3 exactly under
    # any design with p = 1/2; enumerate every arm sequence of the blocks.
    n_ticks, m, delta = 12, 2, -1
    mu = np.random.default_rng(77).integers(0, 20, size=n_ticks)
    pi1, pi0 = switchback_exposure_probabilities(points, n_ticks=n_ticks, m=m)
    block_lengths = np.diff(np.append(points, n_ticks + 1))
    arms = np.array(list(itertools.product([0, 1], repeat=len(points))))
    w = np.repeat(arms, block_lengths, axis=1)  # (assignments, ticks)
    lagged = w[:, m:] + w[:, m - 1:-1] + w[:, :-2]
    outcome = mu[m:] + delta * lagged
    tau_hat = np.mean(outcome * ((lagged == 3) / pi1[m:] - (lagged == 0) / pi0[m:]), axis=1)
    assert tau_hat.mean() == pytest.approx(3 * delta, abs=1e-10)


def test_switchback_inputs_are_validated(hand_case):
    panel, schedule = hand_case
    with pytest.raises(ValueError, match="burn_in_ticks"):
        switchback_difference(panel, schedule, burn_in_ticks=-1)
    with pytest.raises(ValueError, match="burn_in_ticks"):
        switchback_difference(panel, schedule, burn_in_ticks=True)
    with pytest.raises(ValueError, match="ticks"):
        switchback_difference(_one_user_panel(np.ones(7)), _market_schedule([1, 0], 4))
    user_schedule = AssignmentSchedule(unit_of_user=np.arange(2), is_treated=np.ones((2, 2), bool),
                                       period_start_ticks=[0, 4], n_ticks=8, unit_kind="user")
    with pytest.raises(ValueError, match="'market' or 'pool'"):
        switchback_difference(panel, user_schedule)
    wrong_pools = AssignmentSchedule(unit_of_user=np.array([0, 1]),
                                     is_treated=np.ones((2, 2), bool), period_start_ticks=[0, 4],
                                     n_ticks=8, unit_kind="pool")
    with pytest.raises(ValueError, match="pool_of_user"):
        switchback_difference(panel, wrong_pools)
    with pytest.raises(ValueError, match="points"):
        switchback_exposure_probabilities([2, 4], n_ticks=6, m=2)
    with pytest.raises(ValueError, match="p must be"):
        switchback_exposure_probabilities([1, 4], n_ticks=6, m=2, p=1.0)


def test_single_block_per_arm_keeps_point_without_se():
    with pytest.warns(DegenerateEstimateWarning, match="single block"):
        est = switchback_difference(_one_user_panel([3, 3, 1, 1]), _market_schedule([1, 0], 2))
    assert est.point == pytest.approx(4 * (3 - 1), abs=1e-12)  # by hand
    assert math.isnan(est.standard_error)


def _dense_block_moments(users_used, arm_users, scale, early, first, second):
    # the working model's matrices formed densely: Q = diag(a) - X Y', Q_E over the burn-in
    # positions, P the pairs of consecutive blocks, G = Q'Q + Q'P Q_E + Q_E'P'Q
    y = users_used / arm_users
    x = users_used * scale
    q = np.diag(x.sum(axis=1)) - x @ y.T
    q_early = np.diag(x[:, early].sum(axis=1)) - x[:, early] @ y[:, early].T
    pairs = np.zeros((users_used.shape[0],) * 2)
    pairs[first, second] = 1.0
    g = q.T @ q + q.T @ pairs @ q_early + q_early.T @ pairs.T @ q
    return float(np.sum(x.sum(axis=1) ** 2)), float(np.trace(g)), float(np.sum(g * g))


def _previous_dense_block_covariance(users_used, arm_users, scale):
    # the block-effect part of the variance's previous code, which formed (B_a, B_a) arrays
    inverse_users = np.divide(1.0, arm_users, out=np.zeros_like(arm_users), where=arm_users > 0)
    q = np.diag((users_used * scale).sum(axis=1)) - (users_used * scale) @ (
        users_used * inverse_users).T
    return q @ q.T


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_block_moments_equal_the_dense_matrices(seed):
    from spillgauge.estimators._switchback_inference import block_moments as _block_moments

    rng = np.random.default_rng(seed)
    users_used = rng.integers(1, 6, (11, 1)) * (rng.random((11, 7)) < 0.8).astype(float)
    users_used[:, 0] = rng.integers(1, 6, 11)          # every position has a block
    arm_users, scale = users_used.sum(axis=0), rng.random(7)
    early = np.arange(7) < 3
    first = np.array([0, 2, 3, 6, 9])
    got = _block_moments(users_used, arm_users, scale, early, first, first + 1)
    want = _dense_block_moments(users_used, arm_users, scale, early, first, first + 1)
    assert got == pytest.approx(want, rel=1e-12)
    # without pairs, G = Q'Q: the previous dense code's Q Q' has the same traces
    none = np.zeros(0, dtype=np.int64)
    _, trace, trace_square = _block_moments(users_used, arm_users, scale, early, none, none)
    previous = _previous_dense_block_covariance(users_used, arm_users, scale)
    assert trace == pytest.approx(np.trace(previous), rel=1e-12)
    assert trace_square == pytest.approx(np.sum(previous ** 2), rel=1e-12)


def test_equal_blocks_match_statsmodels_cluster_robust_variance():
    # Without burn-in and with equal arms of equal blocks, the variance is each arm's
    # B_a / (B_a - 1) times the CR0 cluster-robust variance of OLS of block means on the
    # arm, clusters = blocks (statsmodels, cov_type="cluster", use_correction=False),
    # on the horizon's scale (Bell & McCaffrey 2002: CR2 = per-arm factor when equal).
    import statsmodels.api as sm

    rng = np.random.default_rng(8)
    arms = np.array([1, 0, 1, 1, 0, 0, 1, 0], bool)
    series = rng.poisson(9.0, size=arms.size * 4)
    est = switchback_difference(_one_user_panel(series), _market_schedule(arms, 4))
    means = series.reshape(arms.size, 4).mean(axis=1)
    fit = sm.OLS(means, sm.add_constant(arms.astype(float))).fit(
        cov_type="cluster", cov_kwds={"groups": np.arange(arms.size), "use_correction": False})
    assert est.point == pytest.approx(32 * fit.params[1], rel=1e-12)
    assert est.standard_error ** 2 == pytest.approx(32 ** 2 * fit.bse[1] ** 2 * 4 / 3, rel=1e-12)



def test_imhof_probability_agrees_with_adaptive_quadrature():
    # Imhof (1961)'s integral by scipy.integrate.quad (adaptive) versus the fixed nodes used
    import math

    from scipy import integrate

    from spillgauge.estimators._switchback_inference import probability_not_positive

    rng = np.random.default_rng(0)
    for _ in range(50):
        values = rng.normal(size=int(rng.integers(2, 30))) * rng.exponential(size=1) ** 2
        values[0] = 1.0 + abs(values[0])
        values = values / np.abs(values).max()
        if (values > 0).all():
            continue

        def integrand(t, values=values):
            return (math.sin(0.5 * np.sum(np.arctan(values * t)))
                    / (t * math.exp(0.25 * np.sum(np.log1p((values * t) ** 2)))))

        reference = 0.5 - integrate.quad(integrand, 1e-300, np.inf, limit=400)[0] / math.pi
        assert probability_not_positive(values) == pytest.approx(reference, abs=1e-6)


def test_working_model_df_of_equal_blocks_is_the_exact_t():
    # Equal arms of 5 equal blocks each, no burn-in: under independent normal block effects
    # the studentized difference is exactly t with B - 2 = 8 df (Student 1908; the two-sample
    # t with equal variances and sizes, where Welch's and the pooled variance coincide).
    # The control blocks repeat the treated ones in another order, so both arms have the
    # same rate at every position and the working model gives both arms one variance.
    arms = np.array([1, 0, 1, 1, 0, 0, 1, 0, 1, 0], bool)
    treated_blocks = np.random.default_rng(2).poisson(9.0, size=(5, 3))
    blocks = np.empty((10, 3), dtype=np.int64)
    blocks[arms], blocks[~arms] = treated_blocks, treated_blocks[[3, 0, 4, 1, 2]]
    series = blocks.ravel()
    est = switchback_difference(_one_user_panel(series), _market_schedule(arms, 3))
    assert est.degrees_of_freedom == pytest.approx(8.0, rel=1e-6)


def test_working_model_quantile_covers_among_draws_with_an_interval():
    # Derivation (on paper): with estimate a'u and an indefinite variance estimate u'Ku
    # (u standard normal), a draw gives an interval only when u'Ku > 0; the quantile q
    # must give P(|a'u| <= q sqrt(u'Ku) | u'Ku > 0) = 0.95. Checked by Monte Carlo
    # against the t quantile of the returned df (binomial error, scipy.stats.binomtest).
    from scipy import stats

    from spillgauge.estimators._switchback_inference import working_model_df

    rng = np.random.default_rng(4)
    n = 6
    loading = np.ones(n) / n                  # the mean of n blocks
    residual = np.eye(n) - np.ones((n, n)) / n
    lag = np.eye(n, k=1) + np.eye(n, k=-1)    # lag-1 products: not positive definite
    kernel = residual @ (np.eye(n) + 0.9 * lag) @ residual / (n * (n - 1))
    assert np.linalg.eigvalsh(kernel).min() < 0
    df = working_model_df([(loading, kernel)], 0.95, fallback=float(n - 1))
    q = stats.t.ppf(0.975, df)
    u = rng.standard_normal((200_000, n))
    variance = np.einsum("ri,ij,rj->r", u, kernel, u)
    has_interval = variance > 0
    assert 0.05 < 1 - has_interval.mean() < 0.5           # some draws give no interval
    assert np.isfinite(df)
    hits = int(np.sum((u @ loading) ** 2 <= q * q * variance))
    assert stats.binomtest(hits, int(has_interval.sum()), 0.95).pvalue > 0.001


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_bound_form_equals_the_dense_bound(seed):
    # The bound replaces each lag-1 product 2 psi_b psi_c^E by psi_b^2 + (psi_c^E)^2 (the
    # inequality 2xy <= x^2 + y^2; Aronow & Samii 2017 bound inestimable products this
    # way): G_bound = Q'(I + W_open) Q + Q_E' W_close Q_E, formed densely here.
    from spillgauge.estimators._switchback_inference import (
        bound_form,
        sparse_low_rank_moments,
    )

    rng = np.random.default_rng(seed)
    users_used = rng.integers(1, 6, (11, 1)) * (rng.random((11, 7)) < 0.8).astype(float)
    users_used[:, 0] = rng.integers(1, 6, 11)
    arm_users, scale = users_used.sum(axis=0), rng.random(7)
    early = np.arange(7) < 3
    first = np.array([0, 2, 3, 6, 9])
    second = first + 1
    y, x = users_used / arm_users, users_used * scale
    q = np.diag(x.sum(axis=1)) - x @ y.T
    q_early = np.diag(x[:, early].sum(axis=1)) - x[:, early] @ y[:, early].T
    opens = np.diag(1.0 + np.bincount(first, minlength=11))
    closes = np.diag(np.bincount(second, minlength=11).astype(float))
    dense = q.T @ opens @ q + q_early.T @ closes @ q_early
    loading, diagonal, left, right = bound_form(users_used, arm_users, scale, early, first,
                                                second)
    assert np.allclose(np.diag(diagonal) + left @ right.T, dense, rtol=1e-12, atol=1e-12)
    assert np.allclose(loading, x.sum(axis=1))
    trace, trace_square = sparse_low_rank_moments(diagonal, left, right)
    assert trace == pytest.approx(np.trace(dense), rel=1e-12)
    assert trace_square == pytest.approx(np.sum(dense * dense), rel=1e-12)
    assert np.linalg.eigvalsh(dense).min() > -1e-9 * np.abs(dense).max()  # positive
    # and the bound's quadratic form is never below the unbiased one
    lagged = q.T @ q
    pairs = np.zeros((11, 11))
    pairs[first, second] = 1.0
    lagged = lagged + q.T @ pairs @ q_early + q_early.T @ pairs.T @ q
    assert np.linalg.eigvalsh(dense - lagged).min() > -1e-9 * np.abs(dense).max()


def test_variance_that_is_not_positive_falls_back_to_its_bound():
    # Minimax reading: a market of 12 blocks of 3 ticks, burn-in 3, so only blocks that kept
    # the previous block's arm count (the time before the horizon is control). Used: treated
    # 5, 6, 7 (two consecutive pairs), control 0 and 3. The lag-1 products make the unbiased
    # variance negative here; the estimate then takes the bound 2 psi_5^2 + 3 psi_6^2 +
    # 2 psi_7^2 (each product 2xy -> x^2 + y^2), computed by hand below, each arm with the
    # factor Sum a^2 / tr(G) that makes it unbiased under the working model.
    arms = [0, 1, 0, 0, 1, 1, 1, 1, 0, 1, 0, 1]
    orders = np.array([2, 5, 2, 9, 6, 3, 2, 4, 3, 7, 4, 0, 7, 5, 7, 3, 3, 7, 3, 2, 1, 4, 4,
                       8, 4, 5, 6, 3, 4, 6, 8, 5, 5, 3, 12, 6], dtype=float)
    est = switchback_difference(_one_user_panel(orders.astype(int)), _market_schedule(arms, 3),
                                burn_in_ticks=3)
    blocks = orders.reshape(12, 3)
    treated, control = blocks[[5, 6, 7]], blocks[[0, 3]]
    r1, r0 = treated.mean(axis=0), control.mean(axis=0)
    assert est.point == pytest.approx(12 * np.sum(r1 - r0), rel=1e-12)
    psi1 = 12 * (treated - r1).sum(axis=1) / 3
    psi0 = 12 * (control - r0).sum(axis=1) / 2
    unbiased = np.sum(psi1 ** 2) + 2 * (psi1[0] * psi1[1] + psi1[1] * psi1[2])
    assert unbiased < 0                                   # the case this test is about

    def factor(n_used, rate, opens, closes):
        # working model: F_bj = r_j u_b, u_b iid (0, 1); psi = Q u, Q = I_a - X Y'
        x = np.tile(12 * rate / n_used, (n_used, 1))
        y = np.full((n_used, 3), 1.0 / n_used)
        q = np.diag(x.sum(axis=1)) - x @ y.T
        g = q.T @ np.diag(opens) @ q + q.T @ np.diag(closes) @ q
        return np.sum(x.sum(axis=1) ** 2) / np.trace(g)

    bound1 = 2 * psi1[0] ** 2 + 3 * psi1[1] ** 2 + 2 * psi1[2] ** 2
    variance = (factor(3, r1, [2.0, 2.0, 1.0], [0.0, 1.0, 1.0]) * bound1
                + factor(2, r0, [1.0, 1.0], [0.0, 0.0]) * np.sum(psi0 ** 2))
    assert est.standard_error ** 2 == pytest.approx(variance, rel=1e-10)
    assert np.isfinite(est.degrees_of_freedom) and est.degrees_of_freedom > 0
    assert est.ci_low < est.point < est.ci_high
