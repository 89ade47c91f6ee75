"""The test of interference's sentence names the study's outcome unit."""

from spillgauge.report.text import interference_lines


class _Test:
    n_reps, rejection_rate, is_detected, mean_delta = 10, 0.2, False, 0.008


class _Design:
    label, interference = "interference-test-pools", _Test()


def _study(outcome):
    class _Scenario:
        pass

    scenario = _Scenario()
    scenario.study = type("S", (), {"alpha": 0.05, "outcome": outcome})()
    return type("Study", (), {"scenario": scenario, "designs": {"d": _Design()}})()


def test_orders_keep_their_words():
    (line,) = interference_lines(_study("orders"))
    assert "mean difference +0.008 orders per user" in line


def test_conversion_names_the_share_of_users():
    (line,) = interference_lines(_study("conversion"))
    assert "share of users with a fulfilled order" in line and "orders per user" not in line
