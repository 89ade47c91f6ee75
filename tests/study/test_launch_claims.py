"""A regional launch in whole markets: pre/post, DiD and synthetic control against the truth."""

from __future__ import annotations

import math

import numpy as np
import pytest

from spillgauge.market.build import build_market
from spillgauge.study.run import run_study
from tests.conftest import make_scenario

ESTIMATORS = ("pre_post", "did", "synthetic_control")


def _scenario(*, trend=0.0, factor_sd=0.0, choose="random", stock_cover=50.0):
    pools = {"count": 30, "stock_cover": stock_cover}
    if factor_sd > 0:
        pools.update(factor_count=2, factor_sd=factor_sd)
    return make_scenario(
        users={"count": 6000, "orders_per_week": 3.0}, pools=pools,
        calendar={"days": 28, "trend_per_week": trend}, effect={"lift": 0.2},
        design=[{"kind": "regional_launch", "pools": 5, "launch_day": 14, "choose": choose,
                 "estimator": e} for e in ESTIMATORS])


def _errors(study, estimator):
    label = f"launch-random-5-{estimator.replace('_', '-')}"
    runs = [rep.runs[label] for rep in study.replications]
    return np.array([r.estimate.point - r.truth for r in runs]), runs


def _mean_trend(a_hours, b_hours, g):
    """Mean of (1 + g)^(h / 168) over [a, b] hours (its integral / length, closed form)."""
    k = math.log1p(g) / 168
    return (math.exp(k * b_hours) - math.exp(k * a_hours)) / (k * (b_hours - a_hours))


def test_trend_biases_pre_post_by_its_growth_and_leaves_did_and_synthetic_control_unbiased():
    g = 0.2
    study = run_study(_scenario(trend=g), reps=24, seed=2, workers=1)
    market = build_market(study.scenario, study.seed)
    # No interference, ample stock: a launched user's control orders over the 14 post days
    # exceed its pre-period orders by r x 24 x 14 x (mean trend after - mean trend before);
    # pre/post counts that growth as effect. Expected bias = 14 days x 24 h x mean rate of
    # the launched users x (mean trend over days 14-28 - over days 0-14) (closed form of the
    # geometric trend), averaged over replications' launched pools.
    errors, runs = _errors(study, "pre_post")
    growth = _mean_trend(14 * 24, 28 * 24, g) - _mean_trend(0, 14 * 24, g)
    from spillgauge.designs.registry import kind_of
    from spillgauge.seeding import ASSIGNMENT, design_key, stream

    spec = study.scenario.design("launch-random-5-pre-post")
    predicted = []
    for rep in range(study.reps):
        rng = np.random.default_rng(stream(study.seed, rep, ASSIGNMENT, design_key(spec.label)))
        launched = kind_of(spec).draw(market, spec, rng=rng).user_is_treated(1)
        predicted.append(14 * 24 * market.rate_per_hour[launched].mean() * growth)
    predicted = float(np.mean(predicted))
    assert predicted > 1.0
    assert abs(errors.mean() - predicted) < 4 * errors.std(ddof=1) / math.sqrt(errors.size)
    # Difference in differences and synthetic control difference the trend away (pools
    # chosen at random: equal expected levels, so the multiplicative trend adds equal
    # expected amounts): mean error within 4 MC SE of 0.
    for estimator in ("did", "synthetic_control"):
        errors, _ = _errors(study, estimator)
        assert abs(errors.mean()) < 4 * errors.std(ddof=1) / math.sqrt(errors.size), estimator


def test_pool_factors_hurt_did_much_more_than_synthetic_control():
    # Pools loading on shared random-walk factors follow different trends, so parallel
    # trends fail: DiD's error grows with factor_sd, while synthetic control, fitting the
    # launched pools' pre-period path by other pools with similar loadings, loses much less
    # (Abadie, Diamond & Hainmueller 2010, section 2.2, the interactive fixed-effects model).
    rmse = {}
    for factor_sd in (0.0, 0.1):
        study = run_study(_scenario(factor_sd=factor_sd), reps=20, seed=4, workers=1)
        for estimator in ("did", "synthetic_control"):
            errors, _ = _errors(study, estimator)
            rmse[estimator, factor_sd] = float(np.sqrt(np.mean(errors ** 2)))
    assert rmse["did", 0.1] > 1.5 * rmse["did", 0.0]
    assert rmse["synthetic_control", 0.1] < 0.75 * rmse["did", 0.1]
    assert rmse["synthetic_control", 0.1] - rmse["synthetic_control", 0.0] < \
        rmse["did", 0.1] - rmse["did", 0.0]


def test_launch_summary_names_its_estimand_and_is_never_recommended():
    scenario = make_scenario(
        users={"count": 600}, pools={"count": 10}, calendar={"days": 10},
        design=[{"kind": "user"},
                {"kind": "regional_launch", "pools": 3, "launch_day": 5, "estimator": "did"}])
    study = run_study(scenario, reps=3, seed=0, workers=1)
    entry = {d["label"]: d for d in study.summary()["designs"]}
    assert entry["user"]["estimand"] == "gte"
    assert entry["user"]["truth"] == pytest.approx(study.truth.gte)
    launch = entry["launch-largest-3-did"]
    assert launch["estimand"] == "launched_pools" and launch["is_randomized"] is False
    truths = [rep.runs["launch-largest-3-did"].truth for rep in study.replications]
    assert launch["truth"] == pytest.approx(np.mean(truths))
    assert study.recommendation.ranking == ("user",)  # the launch is never a candidate


def test_relative_truth_of_a_launch_is_the_lift_without_interference():
    # No interference (no peer effect, stock far above demand): a launched user's demand rate
    # is multiplied by 1 + lift after the launch and every demanded order is fulfilled, so
    # the launched pools' effect over their all-control mean is the lift, 0.2, up to the
    # common-random-number thinning noise (rule of thumb for a multiplicative lift, common
    # practice, no source): within 4 SE of the replications' spread, and each replication's
    # relative truth within 0.05 of it.
    study = run_study(_scenario(), reps=4, seed=5, workers=1)  # stock_cover 50: ample
    for estimator in ESTIMATORS:
        _, runs = _errors(study, estimator)
        relative = np.array([r.truth_relative for r in runs])
        assert np.all(np.abs(relative - 0.2) < 0.05), relative
        assert abs(relative.mean() - 0.2) < 4 * relative.std(ddof=1) / 2 + 1e-3
        summary = study.designs[f"launch-random-5-{estimator.replace('_', '-')}"]
        assert summary.relative is not None  # rel.effect and rel.cov against this truth


def test_printed_launch_table_groups_rows_by_the_question_they_answer():
    from spillgauge.report.text import study_text

    scenario = make_scenario(
        users={"count": 600, "history_days": 7}, pools={"count": 10}, calendar={"days": 10},
        design=[{"kind": "user"},
                {"kind": "opt_in", "take_up": 0.3, "estimator": "naive"},
                {"kind": "regional_launch", "pools": 3, "launch_day": 5, "estimator": "did"},
                {"kind": "regional_launch", "pools": 3, "launch_day": 5,
                 "estimator": "pre_post"}])
    study = run_study(scenario, reps=2, seed=0, workers=1)
    text = study_text(study)
    table = text.split("never recommended):\n")[1].split("\n\n")[0].splitlines()
    # One line per question above its rows, not a column repeated on every row.
    assert [line for line in table if line.endswith(":")] == [
        "the effect on the users who opted in (ATT):",
        "the effect on the launched pools after the launch:"]
    assert "answers" not in table[0]
    assert max(map(len, table)) <= 100, table
    # The relative columns follow in a table of their own, one row per launch.
    relative = text.split("against the launch's relative truth:\n")[1].split("\n\n")[0]
    relative = relative.splitlines()
    assert relative[0].split() == ["design", "rel.effect", "rel.cov"]
    assert len(relative) == 2 + 3 and max(map(len, relative)) <= 100, relative
    # The page's launch section carries the same relative columns.
    from spillgauge.report.html import render_html

    launches = render_html(study, {}).split('id="launches"')[1]
    assert "relative effect" in launches and "relative CI coverage" in launches


def test_the_users_left_out_are_counted_in_the_study_outcome():
    # The note on users a launch leaves out speaks the outcome's unit (orders by default).
    from spillgauge.statistics.launches import LaunchRow, not_randomizing_note
    from spillgauge.statistics.metrics import design_metrics

    m = design_metrics([1.5, 1.7, 1.6, 1.6], [0.1] * 4, [1.3, 1.5, 1.4, 1.4],
                       [1.7, 1.9, 1.8, 1.8], 1.0)
    rows = [LaunchRow("opt-in-naive", "opt_in", "the ATT", 1.0, -0.2, m)]
    orders = not_randomizing_note(rows, randomized_label=None, randomized_metrics=None,
                                  alpha=0.05)
    revenue = not_randomizing_note(rows, randomized_label=None, randomized_metrics=None,
                                   alpha=0.05, unit="(revenue per user)")
    assert "leaves out by -0.2 orders each" in orders
    assert "leaves out by -0.2 (revenue per user)" in revenue and "orders" not in revenue
