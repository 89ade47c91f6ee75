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
    # The Hajek estimate is the OLS slope of y on the arm; its variance is the cluster-robust
    # sandwich CR0 (Liang & Zeger 1986; statsmodels cov_type="cluster" without its
    # correction) times G / (G - 1) (Cameron & Miller 2015, J. Human Resources 50, sec. VI).
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
    expected_variance = fit.cov_params()[1, 1] * n_groups / (n_groups - 1)
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
