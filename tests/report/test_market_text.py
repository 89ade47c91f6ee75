"""What `spillgauge check` prints and `spillgauge new` writes about demand's shocks and trends."""

from __future__ import annotations

from importlib import resources

from spillgauge.market.build import build_market
from spillgauge.report.text import market_text
from spillgauge.study.market_summary import summarise_market
from tests.conftest import make_scenario

DEMAND_KEYS = {"calendar": ("trend_per_week", "daily_shock_sd"),
               "pools": ("shock_sd", "shock_autocorrelation", "factor_count", "factor_sd")}


def test_check_names_the_trend_shocks_and_pool_factors():
    scenario = make_scenario(
        users={"count": 200}, calendar={"days": 7, "trend_per_week": 0.08,
                                       "daily_shock_sd": 0.05},
        pools={"count": 6, "shock_sd": 0.1, "shock_autocorrelation": 0.5, "factor_count": 2,
               "factor_sd": 0.03})
    text = market_text(scenario, summarise_market(build_market(scenario, 1)))
    lines = text.splitlines()
    start = next(i for i, line in enumerate(lines) if line.startswith("demand"))
    end = next(i for i in range(start + 1, len(lines)) if not lines[i].startswith(" " * 12))
    demand = " ".join(line.strip() for line in lines[start:end])  # wrapped under its label
    assert demand == ("demand      trend +8.0% a week; daily shocks (log SD, AR(1)) "
                      "market-wide 0.05 (0.5), per pool 0.1 (0.5); 2 shared pool factor(s), "
                      "step SD 0.03")


def test_check_fits_100_columns_with_continuations_under_the_values():
    # A scenario whose design list and supply line are each longer than a terminal line.
    scenario = make_scenario(
        users={"count": 200}, calendar={"days": 7, "trend_per_week": 0.08}, pools={"count": 6},
        design=[{"kind": "switchback", "block_hours": 24, "burn_in_hours": h, "per": "pool",
                 "label": f"switchback-24h-burn{h}h-per-pool-long-label"} for h in range(1, 6)])
    text = market_text(scenario, summarise_market(build_market(scenario, 1)))
    lines = text.splitlines()
    assert max(len(line) for line in lines) <= 100, text
    designs = lines.index(next(line for line in lines if line.startswith("designs")))
    words = " ".join(line.strip() for line in lines[designs:]).split(", ")
    assert words[0] == "designs     switchback-24h-burn1h-per-pool-long-label"
    assert all(line.startswith(" " * 12) for line in lines[designs + 1:])
    assert len(lines) > designs + 1  # it did wrap


def test_new_template_shows_every_demand_key():
    template = resources.files("spillgauge.scenarios").joinpath("_template.toml.txt").read_text()
    for section, keys in DEMAND_KEYS.items():
        body = template.split(f"[{section}]")[1].split("\n[")[0]
        for key in keys:
            assert f"\n{key} = " in body, (section, key)
