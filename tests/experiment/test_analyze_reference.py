"""analyze on a hand-made orders file equals statsmodels' regressions on the same data."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from spillgauge import analyze_experiment, assign_design
from spillgauge.experiment.folder import write_assignment
from tests.conftest import make_scenario


@pytest.fixture(scope="module")
def scenario():
    return make_scenario(name="hand_made", calendar={"days": 3},
                         users={"count": 60, "history_days": 7}, pools={"count": 8},
                         design=[{"kind": "user"}, {"kind": "cluster", "clusters": "pools"}])


def _orders(folder, seed: int) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Write a hand-made orders file (zero rows left out, a missing row counts as 0)."""
    users = pd.read_csv(folder / "assignment.csv", dtype={"user_id": str, "pool_id": str})
    rng = np.random.default_rng(seed)
    dates = ["2027-03-01", "2027-03-02", "2027-03-03"]
    rows = [(u, p, d, int(rng.poisson(1.0 + 0.8 * (arm == "treatment"))))
            for u, p, arm in zip(users["user_id"], users["pool_id"], users["arm"]) for d in dates]
    orders = pd.DataFrame(rows, columns=["user_id", "pool_id", "date", "orders"])
    orders[orders["orders"] > 0].to_csv(folder / "orders.csv", index=False)
    return users, orders


def _regression_data(users: pd.DataFrame, orders: pd.DataFrame):
    totals = orders.groupby("user_id")["orders"].sum()
    y = users["user_id"].map(totals).fillna(0).to_numpy(float)
    z = (users["arm"] == "treatment").to_numpy(float)
    return y, sm.add_constant(z)


def test_user_design_equals_ols_with_hc2(scenario, tmp_path):
    # Difference in means with the Neyman variance equals the OLS slope of y on the arm with
    # the HC2 covariance (Samii & Aronow 2012, Statistics & Probability Letters 82, 365-370).
    write_assignment(assign_design(scenario, "user", seed=8, start="2027-03-01"), tmp_path)
    users, orders = _orders(tmp_path, seed=1)
    y, x = _regression_data(users, orders)
    fit = sm.OLS(y, x).fit(cov_type="HC2")
    estimate = analyze_experiment(tmp_path).estimate
    assert estimate.method == "difference_in_means"
    assert estimate.point == pytest.approx(fit.params[1], rel=1e-12)
    assert estimate.standard_error == pytest.approx(fit.bse[1], rel=1e-10)
    assert estimate.ci_low < estimate.point < estimate.ci_high


def test_cluster_design_equals_ols_with_cluster_robust_covariance(scenario, tmp_path):
    # The Hajek estimate is the OLS slope of y on the arm; its variance is CR2 (Bell &
    # McCaffrey 2002): each cluster's residual sum from statsmodels' fit scaled by
    # (1 - N_g / N_a)^(-1/2), N_a the users of its arm (for this regression H_gg = J / N_a).
    write_assignment(assign_design(scenario, "cluster-pools", seed=8, start="2027-03-01"),
                     tmp_path)
    users, orders = _orders(tmp_path, seed=2)
    y, x = _regression_data(users, orders)
    groups = pd.factorize(users["pool_id"])[0]
    n_groups = np.unique(groups).size
    fit = sm.OLS(y, x).fit(cov_type="cluster", cov_kwds={"groups": groups,
                                                         "use_correction": False})
    estimate = analyze_experiment(tmp_path).estimate
    assert estimate.method == "hajek_cluster"
    assert estimate.n_units == n_groups
    assert estimate.point == pytest.approx(fit.params[1], rel=1e-12)
    arm = np.asarray(x)[:, 1] > 0.5
    residual_sums = np.bincount(groups, weights=np.asarray(fit.resid))
    sizes = np.bincount(groups).astype(float)
    group_arm = np.bincount(groups, weights=arm.astype(float)) > 0
    arm_users = np.where(group_arm, sizes[group_arm].sum(), sizes[~group_arm].sum())
    expected_variance = float(np.sum(residual_sums ** 2 / ((1 - sizes / arm_users)
                                                           * arm_users ** 2)))
    assert estimate.standard_error ** 2 == pytest.approx(expected_variance, rel=1e-10)


def test_rows_in_any_order_and_zero_rows_give_the_same_estimate(scenario, tmp_path):
    write_assignment(assign_design(scenario, "user", seed=8, start="2027-03-01"), tmp_path)
    _orders(tmp_path, seed=3)
    first = analyze_experiment(tmp_path).estimate
    frame = pd.read_csv(tmp_path / "orders.csv", dtype=str)
    shuffled = frame.sample(frac=1.0, random_state=0)
    zero = pd.DataFrame({"user_id": [frame["user_id"].iat[0]], "pool_id":
                         [frame["pool_id"].iat[0]], "date": ["2027-03-03"], "orders": ["0"]})
    if not ((frame["user_id"] == zero["user_id"].iat[0]) & (frame["date"] == "2027-03-03")).any():
        shuffled = pd.concat([shuffled, zero])
    shuffled.to_csv(tmp_path / "shuffled.csv", index=False)
    again = analyze_experiment(tmp_path, orders=tmp_path / "shuffled.csv").estimate
    assert (again.point, again.standard_error) == (first.point, first.standard_error)


def _outcome_assignment(tmp_path, outcome: str):
    scenario = make_scenario(name="hand_made", calendar={"days": 3},
                             users={"count": 60, "history_days": 7}, pools={"count": 8},
                             study={"outcome": outcome}, design=[{"kind": "user"}])
    write_assignment(assign_design(scenario, "user", seed=8, start="2027-03-01"), tmp_path)
    return pd.read_csv(tmp_path / "assignment.csv", dtype={"user_id": str, "pool_id": str})


def _hand_made_rows(users: pd.DataFrame, seed: int) -> pd.DataFrame:
    """Hourly user rows with orders and revenue (zero rows left out)."""
    rng = np.random.default_rng(seed)
    rows = []
    for u, p, arm in zip(users["user_id"], users["pool_id"], users["arm"]):
        for date in ("2027-03-01", "2027-03-02", "2027-03-03"):
            for hour in rng.choice(24, size=2, replace=False):
                n = int(rng.poisson(0.15 + 0.15 * (arm == "treatment")))
                rows.append((u, p, date, int(hour), n, round(n * rng.gamma(2.0, 7.5), 2)))
    frame = pd.DataFrame(rows, columns=["user_id", "pool_id", "date", "hour", "orders",
                                        "revenue"])
    return frame[frame["orders"] > 0]


def _ols_hc2(users: pd.DataFrame, y: np.ndarray):
    z = (users["arm"] == "treatment").to_numpy(float)
    return sm.OLS(y, sm.add_constant(z)).fit(cov_type="HC2"), z


@pytest.mark.parametrize("outcome", ["conversion", "revenue"])
def test_other_outcomes_equal_ols_with_hc2_on_the_derived_outcome(tmp_path, outcome):
    # The outcome per user computed directly with pandas (conversion: any row with orders > 0;
    # revenue: the sum of the user's revenue), then difference in means = OLS slope with HC2
    # (Samii & Aronow 2012, Statistics & Probability Letters 82, 365-370).
    users = _outcome_assignment(tmp_path, outcome)
    rows = _hand_made_rows(users, seed=4)
    rows.to_csv(tmp_path / "orders.csv", index=False)
    if outcome == "conversion":
        per_user = rows.groupby("user_id")["orders"].sum() > 0
    else:
        per_user = rows.groupby("user_id")["revenue"].sum()
    y = users["user_id"].map(per_user).fillna(0).to_numpy(float)
    assert 0 < y.mean() and (outcome != "conversion" or y.mean() < 1)
    fit, z = _ols_hc2(users, y)
    analysis = analyze_experiment(tmp_path)
    estimate = analysis.estimate
    assert estimate.point == pytest.approx(fit.params[1], rel=1e-12)
    assert estimate.standard_error == pytest.approx(fit.bse[1], rel=1e-10)
    # The relative effect: delta method for a ratio of independent arm means (Casella & Berger
    # 2002, 5.5.4): R = m1/m0 - 1, Var(R) = [s1^2/n1 + (m1/m0)^2 s0^2/n0] / m0^2.
    y1, y0 = y[z == 1], y[z == 0]
    m1, m0 = y1.mean(), y0.mean()
    variance = (y1.var(ddof=1) / y1.size + (m1 / m0) ** 2 * y0.var(ddof=1) / y0.size) / m0 ** 2
    from spillgauge.experiment.analyze import analysis_record

    relative = analysis_record(analysis)["relative_effect"]
    assert relative["point"] == pytest.approx(m1 / m0 - 1, rel=1e-10)
    assert relative["standard_error"] == pytest.approx(np.sqrt(variance), rel=1e-8)


def test_conversion_falls_in_the_period_of_the_first_order(tmp_path):
    # The simulation's definition (worlds/outcome.py): a user converts in the tick of the first
    # fulfilled order. Checked against pandas' minimum timestamp per user.
    from spillgauge.experiment.folder import read_assignment
    from spillgauge.experiment.orders import read_orders

    users = _outcome_assignment(tmp_path, "conversion")
    rows = _hand_made_rows(users, seed=5).sample(frac=1.0, random_state=1)  # any row order
    rows.to_csv(tmp_path / "orders.csv", index=False)
    assignment = read_assignment(tmp_path)
    panel = read_orders(tmp_path / "orders.csv", assignment)
    stamp = pd.to_datetime(rows["date"]) + pd.to_timedelta(rows["hour"], unit="h")
    first = stamp.groupby(rows["user_id"]).min()
    hours = ((first - pd.Timestamp("2027-03-01")) / pd.Timedelta(hours=1)).astype(int)
    index = pd.Index(assignment.user_ids).get_indexer(first.index)
    expected_days = np.zeros((users.shape[0], 3))
    expected_days[index, hours.to_numpy() // 24] = 1
    np.testing.assert_array_equal(panel.outcome_days, expected_days)
    expected_pool = np.zeros_like(panel.pool_outcome)
    np.add.at(expected_pool, (assignment.pool_of_user[index],
                              hours.to_numpy() // assignment.tick_hours), 1)
    np.testing.assert_array_equal(panel.pool_outcome, expected_pool)
