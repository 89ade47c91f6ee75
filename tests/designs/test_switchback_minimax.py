"""Minimax switchbacks (Bojinov, Simchi-Levi & Zhao 2023) drawn for the scenario's carryover."""

from __future__ import annotations

import math

import numpy as np
import pytest

from spillgauge.designs.registry import kind_of
from spillgauge.designs.switchback_minimax import carryover_order
from spillgauge.errors import ScenarioError
from spillgauge.market.build import build_market
from spillgauge.study.run import run_study
from tests.conftest import make_scenario


def test_carryover_order_by_hand():
    # Dose 2^(-t/h) (docs/model.md) is <= 5% once t >= h log2(20) = 4.32 h: h = 6 h gives 26
    # hourly ticks, rounded up to 28, the next divisor of 672 (= 2^5 3 7).
    assert carryover_order(6.0, 1, 672, 0.05) == 28
    assert carryover_order(6.0, 2, 336, 0.05) == 14  # 13 two-hour ticks -> divisor 14
    assert carryover_order(6.0, 1, 672, 0.5) == 6   # half the dose after one half-life


def _scenario(half_life: float, days: int = 28, reps: int = 40):
    return make_scenario(
        users={"count": 2000, "orders_per_week": 2.0, "history_days": 0},
        pools={"count": 4, "stock_cover": 1000.0}, calendar={"days": days},
        graph={"model": "none"}, effect={"lift": 0.3, "carryover_half_life_hours": half_life},
        design=[{"kind": "switchback_minimax"}, {"kind": "switchback", "block_hours": 24}],
        study={"reps": reps, "seed": 12})


def test_schedule_uses_the_published_minimax_points():
    # T = 672, m = 28: points {1, 2m+1, 3m+1, ..., (n-2)m+1}, n = T/m = 24 (Bojinov et al.
    # 2023; Facure 2023, ch. 10), i.e. blocks 2m, m, ..., m, 2m.
    scenario = _scenario(6.0)
    spec = scenario.designs[0]
    schedule = kind_of(spec).draw(build_market(scenario, 12), spec,
                                  rng=np.random.default_rng(0))
    m, n = 28, 24
    expected = [0] + [i * m for i in range(2, n - 1)]
    assert schedule.period_start_ticks.tolist() == expected
    assert schedule.period_lengths().tolist() == [2 * m] + [m] * (n - 4) + [2 * m]
    assert spec.label == "switchback-minimax"


def test_too_short_a_horizon_for_the_carryover_is_refused_by_name():
    with pytest.raises(ScenarioError, match=r"calendar\.days .*4 carryover orders"):
        _scenario(30.0, days=3)


def test_minimax_switchback_removes_the_carryover_bias_of_day_blocks():
    # With a 6 h half-life, 24 h blocks without burn-in keep carryover in control blocks
    # (attenuation by the mean control dose, about 14% here); the minimax design with its
    # carryover window left out of switched blocks is unbiased within 4 Monte Carlo SEs.
    study = run_study(_scenario(6.0))
    minimax, day = study.metrics["switchback-minimax"], study.metrics["switchback-24h"]
    assert abs(minimax.bias) <= 4 * minimax.bias_se
    assert day.relative_bias < -0.05 and abs(day.bias) > 4 * day.bias_se
    assert math.isfinite(minimax.coverage)


@pytest.mark.slow
def test_minimax_switchback_interval_is_calibrated_under_the_null():
    # Null calibration (lift 0, carryover half-life 6 h): the 95% interval covers the GTE
    # (zero) at a rate binomtest cannot tell from 95% at the 1% level, over 1000 replications.
    # Every block used is one that kept its arm, so consecutive used blocks form runs whose
    # lag-1 products can outweigh the squares (or cancel them: an arm of two consecutive
    # blocks); the variance then takes the products' bound (2xy <= x^2 + y^2). Before the
    # bound, 2000 replications: 93.2% usable, 94.6% coverage among them; with it 96.3% and
    # 94.6% (the rest have one unswitched block in an arm: no block-level variance).
    from dataclasses import replace

    from scipy.stats import binomtest

    scenario = _scenario(6.0, reps=1000)
    scenario = replace(scenario, effect=replace(scenario.effect, lift=0.0))
    m = run_study(scenario, workers=2).metrics["switchback-minimax"]
    covered = round(m.coverage * m.n_reps)
    print(f"minimax null: covered {covered}/{m.n_reps}, usable {m.usable_share:.3f}, "
          f"estimates {m.n_estimates}")
    assert m.usable_share >= 0.95
    assert binomtest(covered, m.n_reps, 0.95).pvalue > 0.01, (covered, m.n_reps)
