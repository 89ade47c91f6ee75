"""What `spillgauge check` prints and `spillgauge new` writes about demand's shocks and trends."""

from __future__ import annotations

from importlib import resources

import pytest

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


def test_check_says_when_a_trend_makes_stock_bind_late():
    # Stock levels come from the base demand (docs/model.md, stock pools); with a trend g
    # demand at the horizon is (1 + g)^(hours / 168) times the start (docs/model.md, trend),
    # here 1.2^4 = 2.0736 over 28 days, so a start cover of ~1.5 is ~0.72 on the last cycle.
    def supply(trend):
        scenario = make_scenario(users={"count": 300},
                                 calendar={"days": 28, "trend_per_week": trend},
                                 pools={"count": 6, "stock_cover": 1.5},
                                 effect={"lift": 0.0, "peer_lift": 0.0})
        market = summarise_market(build_market(scenario, 1))
        lines = market_text(scenario, market).splitlines()
        start = next(i for i, line in enumerate(lines) if line.strip().startswith("->"))
        end = next(i for i in range(start + 1, len(lines)) if not lines[i].startswith(" " * 12))
        return market, " ".join(line.strip() for line in lines[start:end])

    market, flat = supply(0.0)
    assert market["demand_growth_by_end"] == 1.0
    assert flat == "-> stock covers expected demand in both worlds (stock-outs only by chance)"
    market, growing = supply(0.2)
    assert market["demand_growth_by_end"] == pytest.approx(1.2 ** 4, rel=1e-12)
    cover = market["cover_all_control"]["median"]
    assert cover > 1 > cover / 1.2 ** 4
    assert growing.startswith("-> stock covers expected demand at the start, but demand grows "
                              "107% by the end (trend +20.0% a week), so stock binds on late "
                              "cycles even with no one treated")
    assert f"{cover / 1.2 ** 4:.2f} with no one treated" in growing
