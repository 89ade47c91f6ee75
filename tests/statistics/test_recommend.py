"""Tests of spillgauge.statistics.recommend on hand-built design metrics."""

from __future__ import annotations

import math
import re

import numpy as np
import pytest

from spillgauge.statistics.metrics import DesignMetrics
from spillgauge.statistics.recommend import Candidate, Recommendation, recommend
from spillgauge.statistics.trust import is_trusted

N_REPS = 400
GTE = 1.07


def _metrics(*, bias=0.0, sd=0.1, coverage=0.95, power=0.8, n_reps=N_REPS, gte=GTE,
             **overrides) -> DesignMetrics:
    """DesignMetrics built by hand from bias, SD, coverage and power, with MC SEs."""
    rmse = math.sqrt(bias**2 + sd**2)
    values = dict(
        n_reps=n_reps, n_dropped=0, n_significant=round(power * n_reps),
        mean_estimate=gte + bias, mean_estimate_se=sd / math.sqrt(n_reps),
        bias=bias, bias_se=sd / math.sqrt(n_reps),
        relative_bias=bias / gte, relative_bias_se=sd / math.sqrt(n_reps) / gte,
        sd=sd, sd_se=sd / math.sqrt(2 * (n_reps - 1)),
        rmse=rmse, rmse_se=sd * math.sqrt(2) / (2 * math.sqrt(n_reps)),
        coverage=coverage, coverage_se=math.sqrt(coverage * (1 - coverage) / n_reps),
        ci_width=2 * 1.96 * sd, ci_width_se=0.001,
        power=power, power_se=math.sqrt(power * (1 - power) / n_reps),
        type_s=0.0, type_s_se=0.0, type_m=1.1, type_m_se=0.01,
        mean_se=sd, mean_se_se=0.001,
    )
    values.update(overrides)
    return DesignMetrics(**values)


def _nan_metrics() -> DesignMetrics:
    values = {name: math.nan for name in DesignMetrics.__slots__}
    values.update(n_reps=0, n_dropped=N_REPS, n_significant=0)
    return DesignMetrics(**values)


def _user(metrics, label="user", n_units=10_000.0):
    return Candidate(label=label, is_user_level=True, unit="user", n_units=n_units, metrics=metrics,
                     params={"share": 0.5})


def _pools(metrics, label="cluster-pools", n_units=40.0):
    return Candidate(label=label, is_user_level=False, unit="pool", n_units=n_units, metrics=metrics,
                     params={"clusters": "pools", "estimator": "hajek"})


def _switchback(metrics, label="switchback-24h", n_units=28.0):
    return Candidate(label=label, is_user_level=False, unit="market time block of 24 h",
                     n_units=n_units, metrics=metrics, params={"block_hours": 24})


def _n_sentences(text: str) -> int:
    # A sentence ends with . ! or ? followed by a space or the end (decimals do not).
    return len(re.findall(r"[.!?](?:\s|$)", text))


def test_no_interference_chooses_the_lowest_variance_user_design():
    # REFERENCES.md check 28 (Johari et al. 2022; Ugander et al. 2013): with no
    # interference every design is unbiased and the recommender must choose the
    # lowest-variance design, user-level.
    candidates = [_switchback(_metrics(sd=0.30, power=0.3)),
                  _pools(_metrics(sd=0.15, power=0.6)),
                  _user(_metrics(sd=0.05, power=1.0))]
    r = recommend(candidates, gte=GTE, gte_se=0.01)
    assert isinstance(r, Recommendation)
    assert r.label == "user" and r.is_trustworthy
    assert r.ranking == ("user", "cluster-pools", "switchback-24h")
    assert r.trusted == r.ranking
    assert "No design was more accurate" in r.reason
    assert "cluster-pools" in r.reason and "0.15" in r.reason  # the runner-up's RMSE
    assert 2 <= _n_sentences(r.reason) <= 5


def test_user_level_spillover_bias_chooses_the_pool_cluster_design():
    # Marketplace interference (Johari et al. 2022, REFERENCES.md check 28 second part):
    # user-level is biased and under-covers, pool-level randomization is unbiased.
    user = _metrics(bias=0.41, sd=0.05, coverage=0.30, power=1.0)
    pools = _metrics(bias=0.01, sd=0.20, coverage=0.94, power=0.95)
    r = recommend([_user(user), _pools(pools)], gte=GTE, gte_se=0.01)
    assert r.label == "cluster-pools" and r.is_trustworthy
    assert r.trusted == ("cluster-pools",)
    # Hand-worked bias share: 0.41 of the user-level mean estimate 1.48 is 28%; the
    # bias is +38% of the GTE 1.07.
    assert "28% of the user-level estimate of 1.48 is spillover" in r.reason
    assert "+0.41" in r.reason and "+38%" in r.reason
    assert "coverage 30.0%" in r.reason or "30.0% of replications" in r.reason
    # Cost in SD (0.2 vs 0.05 -> 4.0 times) and power (95% vs 100%).
    assert "4.0 times" in r.reason and "95%" in r.reason and "100%" in r.reason
    assert "pool" in r.reason and "orders per user" in r.reason
    assert 2 <= _n_sentences(r.reason) <= 5


def test_designs_within_monte_carlo_error_prefer_the_finer_unit():
    # Common practice, no source: when trusted designs are equally accurate within MC
    # error, prefer the one with more units. RMSE 0.100 vs 0.102, rmse_se 0.0035 each:
    # gap 0.002 <= 2 * sqrt(2) * 0.0035 = 0.0099.
    graph = Candidate(label="cluster-graph", is_user_level=False, unit="graph community",
                      n_units=25.0, metrics=_metrics(sd=0.100))
    pools = _pools(_metrics(sd=0.102), n_units=40.0)
    r = recommend([graph, pools], gte=GTE, gte_se=0.01)
    assert r.label == "cluster-pools"
    assert r.ranking == ("cluster-graph", "cluster-pools")
    assert "within Monte Carlo error" in r.reason and "40 units" in r.reason


def test_a_clearly_more_accurate_design_beats_the_finer_unit():
    # Same pair with a gap far beyond MC error: the lower RMSE wins despite fewer units.
    graph = Candidate(label="cluster-graph", is_user_level=False, unit="graph community",
                      n_units=25.0, metrics=_metrics(sd=0.10))
    pools = _pools(_metrics(sd=0.13), n_units=40.0)
    assert recommend([graph, pools], gte=GTE, gte_se=0.01).label == "cluster-graph"


def test_finer_unit_ties_are_broken_by_rmse():
    a = _pools(_metrics(sd=0.101), label="cluster-a", n_units=40.0)
    b = _pools(_metrics(sd=0.100), label="cluster-b", n_units=40.0)
    c = _switchback(_metrics(sd=0.099), n_units=28.0)
    assert recommend([a, b, c], gte=GTE, gte_se=0.01).label == "cluster-b"


def test_all_designs_under_covering_means_no_recommendation():
    candidates = [_user(_metrics(bias=0.41, sd=0.05, coverage=0.30)),
                  _pools(_metrics(bias=0.05, sd=0.2, coverage=0.80)),
                  _switchback(_metrics(bias=0.02, sd=0.3, coverage=0.70))]
    r = recommend(candidates, gte=GTE, gte_se=0.01)
    assert r.label is None and not r.is_trustworthy and r.trusted == ()
    assert "No design can be trusted" in r.reason
    for label, coverage in (("user", "30.0%"), ("cluster-pools", "80.0%"),
                            ("switchback-24h", "70.0%")):
        assert f"{label} covers the GTE in {coverage}" in r.reason
    # Least bad by RMSE: cluster-pools, sqrt(0.05^2 + 0.2^2) = 0.206.
    assert "If you must run one, cluster-pools" in r.reason and "0.206" in r.reason
    assert 2 <= _n_sentences(r.reason) <= 5


def test_nan_metrics_are_never_chosen():
    # A design with no usable estimates is ranked last and never chosen, even when it
    # has the most units and the others are untrusted.
    broken = _user(_nan_metrics())
    good = _pools(_metrics(sd=0.2))
    r = recommend([broken, good], gte=GTE, gte_se=0.01)
    assert r.label == "cluster-pools" and r.ranking == ("cluster-pools", "user")
    assert "user gave no usable estimates" in r.reason
    r = recommend([broken, _pools(_metrics(coverage=0.5))], gte=GTE, gte_se=0.01)
    assert r.label is None and "If you must run one, cluster-pools" in r.reason
    r = recommend([broken], gte=GTE, gte_se=0.01)
    assert r.label is None and "nothing to recommend" in r.reason


def test_trust_rule_coverage_threshold():
    # coverage >= 0.95 - max(0.05, 2 coverage_se): 0.90 passes, 0.899 fails at small SE.
    assert is_trusted(_metrics(coverage=0.90, coverage_se=0.01))
    assert not is_trusted(_metrics(coverage=0.899, coverage_se=0.01))
    # A large MC error widens the allowance: 2 * 0.04 = 0.08 -> threshold 0.87.
    assert is_trusted(_metrics(coverage=0.88, coverage_se=0.04))
    assert not is_trusted(_metrics(coverage=0.86, coverage_se=0.04))


def test_trust_rule_refuses_dominating_bias_despite_wide_intervals():
    # Over-wide intervals keep coverage at 99%, but the bias is 3 SDs and 300 bias SEs.
    assert not is_trusted(_metrics(bias=0.3, sd=0.1, coverage=0.99, bias_se=0.001))
    # Bias at most half the SD is accepted (then penalised through RMSE).
    assert is_trusted(_metrics(bias=0.05, sd=0.1, coverage=0.94, bias_se=0.001))
    # Bias beyond half the SD but within 2 MC SE is accepted (not detectable).
    assert is_trusted(_metrics(bias=0.08, sd=0.1, coverage=0.94, bias_se=0.05))


def test_chosen_user_design_within_error_of_a_coarser_one_reports_the_gap():
    user = _user(_metrics(sd=0.101))
    pools = _pools(_metrics(sd=0.100))
    r = recommend([pools, user], gte=GTE, gte_se=0.01)
    assert r.label == "user"
    assert "cluster-pools has a slightly lower RMSE" in r.reason


def test_recommend_refuses_bad_input():
    with pytest.raises(ValueError, match="at least one"):
        recommend([], gte=GTE, gte_se=0.01)
    with pytest.raises(ValueError, match="unique"):
        recommend([_user(_metrics()), _user(_metrics())], gte=GTE, gte_se=0.01)
    with pytest.raises(ValueError, match="alpha"):
        recommend([_user(_metrics())], gte=GTE, gte_se=0.01, alpha=0.0)
    with pytest.raises(ValueError, match="n_units"):
        Candidate(label="x", is_user_level=True, unit="user", n_units=-1.0, metrics=_metrics())


def test_identical_errors_give_the_same_verdict_with_and_without_gte_movement():
    # The trust rule judges each estimate against its own replication's GTE, so moving
    # the GTEs (daily shocks) while keeping every error fixed cannot change the verdict.
    from spillgauge.statistics.metrics import design_metrics
    from spillgauge.statistics.trust import assess_trust

    rng = np.random.default_rng(0)
    # bias 0.08 against an error SD of 0.1 (over half of it), wide intervals keep coverage;
    # judged against the SD of the estimates, the moving GTEs would hide the bias.
    error = 0.08 + rng.normal(0, 0.1, 200)
    still = np.full(200, 1.0)
    moving = 1.0 + rng.normal(0, 0.5, 200)
    verdicts = []
    for gte in (still, moving):
        est = gte + error
        m = design_metrics(est, np.full(200, 0.2), est - 0.4, est + 0.4, gte)
        verdicts.append(assess_trust(m).is_trusted)
    assert verdicts == [False, False]


def test_a_design_that_often_gives_no_estimate_is_not_trusted_and_says_why():
    from spillgauge.statistics.metrics import design_metrics
    from spillgauge.statistics.trust import assess_trust

    est = np.array([1.0, np.nan, 1.1, np.nan, 0.9, 1.0, np.nan, 1.05])
    m = design_metrics(est, np.full(8, 0.1), est - 0.2, est + 0.2, np.ones(8))
    verdict = assess_trust(m, failure_note="every unit in one arm")
    assert not verdict.is_trusted and verdict.problem == "unusable"
    assert "62%" in verdict.reason and "3 of 8" in verdict.reason
    assert "every unit in one arm" in verdict.reason
