"""Tests of spillgauge.sweep.sweep (and report.sweep_figures) on small shared-stock markets.

The statistical checks use the closed-form shared-stock toy model of REFERENCES.md
section 4 (one pool restocked to S each period, N users with Poisson(lambda0) or
Poisson(lambda1) demand per period, random-order service, lost sales) and its check
10, the inventory analogue of the customer-side randomization result of Johari, Li,
Liskovich & Weintraub (2022), Management Science 68(10). The toy model maps exactly
onto a scenario with equal per-user rates from a users file, ``tick_hours = 24``,
``restock_every_hours = 24`` and no lead time: each day is one period and a day's
orders are served in random order from a full pool.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from spillgauge.errors import ScenarioError
from spillgauge.scenario.reading import parse_scenario
from spillgauge.statistics.trust import is_trusted
from spillgauge.study.run import run_study
from spillgauge.sweep.sweep import (
    SweepAxis,
    SweepResult,
    parse_vary,
    run_sweep,
    valid_keys,
    with_value,
    write_sweep,
)

SEED = 20260511
USERS_PER_POOL = 100        # N of REFERENCES section 4
ORDERS_PER_WEEK = 7.0       # lambda0 = 1 order per user per day
LIFT = 0.2                  # lambda1 = 1.2
DAYS = 7
COVERS = (1.0, 1.1, 1.2, 1.6, 3.0)
BINDING = (1.0, 1.1, 1.2)   # stock binds under the mixed demand 1.1 N lambda0 (cover <= 1 + lift)
AMPLE = (1.6, 3.0)          # stock covers the all-treated demand 1.2 N lambda0 with room to spare
METRIC_COLUMNS = [f"{m}{s}" for m in ("mean_estimate", "bias", "relative_bias", "sd", "rmse",
                                      "coverage", "ci_width", "power", "type_s", "type_m")
                  for s in ("", "_se")]


def _users_file(path, n_pools: int):
    lines = ["user_id,pool_id,orders_per_week"]
    lines += [f"u{k}_{i},p{k:02d},{ORDERS_PER_WEEK:g}" for k in range(n_pools)
              for i in range(USERS_PER_POOL)]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def _toy_scenario(folder, n_pools: int, designs: list[dict], cover: float = 1.0):
    """The REFERENCES section 4 toy model: daily order-up-to S, lost sales, equal rates."""
    _users_file(folder / f"users_{n_pools}.csv", n_pools)
    return parse_scenario({
        "name": f"toy-{n_pools}",
        "calendar": {"days": DAYS, "tick_hours": 24},
        "users": {"file": f"users_{n_pools}.csv", "history_days": 0},
        "pools": {"restock_every_hours": 24, "lead_time_hours": 0, "stock_cover": cover,
                  "on_stockout": "lost"},
        "effect": {"lift": LIFT},
        "study": {"reps": 60, "seed": SEED},
        "design": designs,
    }, base_dir=folder)


@pytest.fixture(scope="module")
def pool_sweep(tmp_path_factory):
    """16 pools of 100 users; user-level and pool-level designs over five stock covers."""
    folder = tmp_path_factory.mktemp("pools")
    scenario = _toy_scenario(folder, 16, [{"kind": "user"},
                                          {"kind": "cluster", "clusters": "pools"}])
    axis = SweepAxis(key="pools.stock_cover", values=COVERS)
    return run_sweep(scenario, [axis], reps=60, seed=SEED)


@pytest.fixture(scope="module")
def saved_sweep(tmp_path_factory):
    """A small sweep saved to a results folder (every replication is fsynced, so few)."""
    folder = tmp_path_factory.mktemp("saved")
    scenario = _toy_scenario(folder, 4, [{"kind": "user"},
                                         {"kind": "cluster", "clusters": "pools"}])
    calls = []
    sweep = run_sweep(scenario, [parse_vary("pools.stock_cover=1:3:3")], reps=6, seed=SEED,
                      out=folder / "out", progress=lambda done, total: calls.append((done, total)))
    return sweep, folder / "out", calls


@pytest.fixture(scope="module")
def single_pool_sweep(tmp_path_factory):
    """One pool of N = 100 users (the toy model exactly); user-level design only."""
    folder = tmp_path_factory.mktemp("one_pool")
    scenario = _toy_scenario(folder, 1, [{"kind": "user"}])
    return run_sweep(scenario, [parse_vary("pools.stock_cover=1.0,1.2")], reps=200, seed=SEED)


def _rows(sweep: SweepResult, label: str) -> pd.DataFrame:
    frame = sweep.frame()
    return frame[frame["label"] == label].set_index("pools.stock_cover")


def _small(**sections):
    data = {"name": "small", "users": {"count": 200}, "pools": {"count": 4},
            "calendar": {"days": 7}}
    data.update(sections)
    return parse_scenario(data)


# --- parse_vary --------------------------------------------------------------------------

def test_parse_vary_start_stop_n_matches_numpy_linspace():
    # numpy.linspace is the reference for "N evenly spaced values, inclusive".
    axis = parse_vary("pools.stock_cover=0.8:2.0:7")
    assert axis.key == "pools.stock_cover"
    np.testing.assert_allclose(axis.values, np.linspace(0.8, 2.0, 7), rtol=0, atol=1e-12)
    assert axis.values[0] == 0.8 and axis.values[-1] == 2.0
    assert not axis.is_integer


def test_parse_vary_single_value_and_explicit_list():
    assert parse_vary("effect.lift=0.3:0.9:1").values == (0.3,)
    assert parse_vary("effect.lift=0.05, 0.2,0.5").values == (0.05, 0.2, 0.5)
    assert parse_vary(" effect.peer_lift = 0.1,0.2 ").key == "effect.peer_lift"


def test_parse_vary_integer_keys_round_and_stay_ints():
    # linspace(7, 14, 3) = 7, 10.5, 14 (hand-worked); 10.5 rounds half up to 11.
    axis = parse_vary("calendar.days=7:14:3")
    assert axis.values == (7, 11, 14) and all(type(v) is int for v in axis.values)
    assert axis.is_integer
    assert parse_vary("design.sb.block_hours=6,12.2,24").values == (6, 12, 24)
    assert parse_vary("users.count=800:2000:4").values == (800, 1200, 1600, 2000)


@pytest.mark.parametrize("text", [
    "pools.stock_cover", "pools.stock_cover=", "=1,2", "pools.stock_cover=1:2",
    "pools.stock_cover=1:2:0", "pools.stock_cover=1:2:2.5", "pools.stock_cover=a,b",
    "pools.stock_cover=1:inf:3", "pools.stock_cover=1,1", "pools.stock_cover=1=2",
    "calendar.days=7.2,7.4", "design.sb.block_hours=6:7:3", "pools.nope=1,2",
    "pools.on_stockout=1,2", "study.seed=1,2", "design.sb.label=1,2", "stock_cover=1,2",
])
def test_parse_vary_rejects_bad_syntax_naming_the_option_and_text(text):
    with pytest.raises(ScenarioError) as info:
        parse_vary(text)
    assert info.value.field == "--vary"
    assert repr(text) in str(info.value)


# --- with_value ------------------------------------------------------------------------

def test_with_value_sets_section_keys_and_keeps_the_rest():
    base = _small(graph={"model": "small_world", "mean_degree": 4})
    s = with_value(base, "pools.stock_cover", 0.9)
    assert s.pools.stock_cover == 0.9 and s.pools.count == base.pools.count
    assert s.users == base.users and s.designs == base.designs
    assert with_value(base, "effect.peer_lift", 0.4).effect.peer_lift == 0.4
    assert with_value(base, "effect.carryover_half_life_hours", 6).effect \
        .carryover_half_life_hours == 6.0
    days = with_value(base, "calendar.days", 14.0).calendar.days
    assert days == 14 and type(days) is int
    assert with_value(base, "users.count", 1000).users.count == 1000


def test_with_value_design_key_keeps_label_and_revalidates():
    base = _small(design=[{"kind": "user"},
                          {"kind": "switchback", "label": "sb", "block_hours": 24,
                           "burn_in_hours": 2}])
    s = with_value(base, "design.sb.block_hours", 12)
    spec = s.design("sb")
    assert (spec.label, spec.block_hours, spec.burn_in_hours, spec.index) == ("sb", 12, 2, 1)
    assert s.design("user") == base.design("user")
    dotted = _small(design=[{"kind": "switchback", "label": "sb.v2", "block_hours": 24}])
    assert with_value(dotted, "design.sb.v2.block_hours", 12).design("sb.v2").block_hours == 12
    # Default labels stay too, though they were built from the old parameters.
    t = with_value(_small(), "design.switchback-24h.block_hours", 6)
    assert t.design("switchback-24h").block_hours == 6
    # Scenario-level validation runs again: at most half the 168-hour horizon.
    with pytest.raises(ScenarioError, match=r"design\[1\]\.block_hours"):
        with_value(base, "design.sb.block_hours", 96)
    # DesignSpec validation runs again: burn-in must stay below the block.
    with pytest.raises(ScenarioError, match=r"design\[1\]\.burn_in_hours"):
        with_value(base, "design.sb.block_hours", 2)


def test_with_value_unknown_key_names_it_and_lists_valid_ones():
    base = _small()
    with pytest.raises(ScenarioError, match=r"pools\.stock_covers") as info:
        with_value(base, "pools.stock_covers", 1.0)
    assert info.value.field == "pools.stock_covers"
    assert "pools.stock_cover," in str(info.value)
    assert "design.switchback-24h.block_hours" in str(info.value)
    with pytest.raises(ScenarioError, match=r"one of user, cluster-pools, switchback-24h"):
        with_value(base, "design.nobody.block_hours", 12)
    with pytest.raises(ScenarioError, match=r"design\.user\.block_hours"):
        with_value(base, "design.user.block_hours", 12)  # a user design has no blocks
    assert "design.user.share" in valid_keys(base)


@pytest.mark.parametrize(("key", "value", "field"), [
    ("pools.on_stockout", 1.0, "pools.on_stockout"),     # not numeric
    ("graph.file", 1.0, "graph.file"),                   # not numeric
    ("study.seed", 3, "study.seed"),                     # a sweep argument, not a key
    ("pools.stock_cover", -1.0, "pools.stock_cover"),    # rejected by Pools
    ("pools.lead_time_hours", 30, "pools.lead_time_hours"),
    ("calendar.tick_hours", 5, "calendar.tick_hours"),
    ("calendar.days", 7.5, "calendar.days"),             # integer key, not whole
    ("effect.lift", "0.2", "effect.lift"),               # not a number
    ("effect.peer_lift", 0.3, "effect.peer_lift"),       # no graph: it would change nothing
    ("graph.mean_degree", 4.0, "graph.mean_degree"),     # graph.model = 'none' ignores it
])
def test_with_value_errors_name_the_field(key, value, field):
    with pytest.raises(ScenarioError) as info:
        with_value(_small(), key, value)
    assert info.value.field == field


def test_with_value_refuses_keys_a_users_file_overrides(tmp_path):
    scenario = _toy_scenario(tmp_path, 2, [{"kind": "user"}])
    for key in ("users.count", "users.orders_per_week", "pools.count"):
        with pytest.raises(ScenarioError, match=key.replace(".", r"\.") + ".*file"):
            with_value(scenario, key, 3)


def test_run_sweep_validates_every_point_before_running(tmp_path):
    base = _small()
    with pytest.raises(ScenarioError, match=r"pools\.stock_cover"):
        run_sweep(base, [parse_vary("pools.stock_cover=1,-1")], reps=2, out=tmp_path / "x")
    assert not (tmp_path / "x").exists()
    with pytest.raises(ScenarioError, match=r"--vary"):
        run_sweep(base, [], reps=2)
    with pytest.raises(ScenarioError, match=r"--vary"):
        run_sweep(base, [parse_vary("effect.lift=0.1,0.2")] * 2, reps=2)


# --- the stock-out bias of user-level randomization --------------------------------------

def test_user_level_bias_is_positive_where_stock_binds(pool_sweep):
    # Johari et al. (2022) [ABS]: in supply-constrained markets customer-side (user-level)
    # randomization is biased; REFERENCES section 4 toy model / check 10: the bias is > 0
    # (the treated half buys the shared stock the control half would have bought).
    sweep = pool_sweep
    user = _rows(sweep, "user")
    for cover in BINDING:
        assert user.loc[cover, "bias"] > 4 * user.loc[cover, "bias_se"], cover
    # Check 10 relation: the bias falls toward 0 as S grows (differences ~0.3, SE ~0.03).
    bias = [user.loc[c, "bias"] for c in BINDING]
    assert bias[0] > bias[1] > bias[2] > 0


def test_user_level_bias_vanishes_once_stock_covers_all_treated_demand(pool_sweep):
    # REFERENCES section 4, check 10: demand-constrained (S well above N lambda1) ->
    # user-level randomization is unbiased. Tolerance: 4 MC SE.
    sweep = pool_sweep
    user = _rows(sweep, "user")
    for cover in AMPLE:
        assert abs(user.loc[cover, "bias"]) <= 4 * user.loc[cover, "bias_se"], cover
        assert user.loc[cover, "trusted"]
    for cover in BINDING:
        assert not user.loc[cover, "trusted"]


def test_pool_level_design_is_unbiased_at_every_cover(pool_sweep):
    # REFERENCES section 4: with independent pools each all-treated or all-control there
    # is no interference, so pool-level randomization is unbiased at every S (check 10;
    # the listing-side result of Johari et al. 2022 [ABS]). Pools are equal here, so the
    # Hajek ratio has no small-sample ratio bias either. Tolerance: 4 MC SE.
    sweep = pool_sweep
    pools = _rows(sweep, "cluster-pools")
    for cover in COVERS:
        assert abs(pools.loc[cover, "bias"]) <= 4 * pools.loc[cover, "bias_se"], cover


def test_gte_without_stock_outs_is_lift_times_baseline_orders(pool_sweep):
    # Closed form (STYLE.md section 8; REFERENCES section 7): with no stock-outs and no
    # spillover, GTE = lift x expected baseline orders = 0.2 x (1 order/day x 7 days).
    # At cover 3 the pool holds 300 against Poisson(120) demand: P(D > 300) < 1e-40.
    sweep = pool_sweep
    user = _rows(sweep, "user")
    assert stats.poisson.sf(300, 120) < 1e-40
    gte, gte_se = user.loc[3.0, "gte"], user.loc[3.0, "gte_se"]
    assert abs(gte - LIFT * DAYS) <= 4 * gte_se
    # Check 10 relation: supply-constrained -> GTE far below it, and rising with S.
    gtes = [user.loc[c, "gte"] for c in COVERS]
    assert all(a < b + 4 * user.loc[3.0, "gte_se"] for a, b in zip(gtes, gtes[1:]))
    assert gtes[0] < 0.3 * LIFT * DAYS


def _expected_min(mean: float, stock: int) -> float:
    # REFERENCES section 7: E min(Poi(L), S) = L F(S-1; L) + S (1 - F(S; L)).
    return mean * stats.poisson.cdf(stock - 1, mean) + stock * stats.poisson.sf(stock, mean)


@pytest.mark.parametrize(("cover", "stock", "gte_table", "dm_table"), [
    (1.0, 100, 3.8629, 18.0162),
    (1.2, 120, 15.7356, 19.8197),
])
def test_single_pool_matches_the_closed_form_toy_model(single_pool_sweep, cover, stock,
                                                       gte_table, dm_table):
    # REFERENCES section 4 table (N = 100, lambda0 = 1, lambda1 = 1.2, p = 1/2), per period
    # and scaled by N: GTE = E min(Poi(N l1), S) - E min(Poi(N l0), S);
    # E[DM] N = E min(Poi(N(p l1 + (1-p) l0)), S) (q/p - (1-q)/(1-p)), q = p l1/(p l1 + (1-p) l0).
    n, p, l0, l1 = USERS_PER_POOL, 0.5, 1.0, 1.0 + LIFT
    q = p * l1 / (p * l1 + (1 - p) * l0)
    gte_closed = _expected_min(n * l1, stock) - _expected_min(n * l0, stock)
    dm_closed = _expected_min(n * (p * l1 + (1 - p) * l0), stock) * (q / p - (1 - q) / (1 - p))
    assert gte_closed == pytest.approx(gte_table, abs=1e-4)   # the table, recomputed with scipy
    assert dm_closed == pytest.approx(dm_table, abs=1e-4)
    user = _rows(single_pool_sweep, "user").loc[cover]
    assert single_pool_sweep.studies[0].market_summary["order_up_to"]["max"] == 100
    scale = n / DAYS   # the study reports orders per user over the 7-day horizon
    # Monte Carlo check, 4 SE (REFERENCES "MC" tolerance).
    assert abs(user["gte"] * scale - gte_closed) <= 4 * user["gte_se"] * scale
    assert abs(user["mean_estimate"] * scale - dm_closed) <= 4 * user["mean_estimate_se"] * scale
    # Check 10 relation: the user-level estimate overstates the GTE.
    assert user["bias"] > 4 * user["bias_se"]


# --- the answer, the frame and the files --------------------------------------------------

def test_answer_names_the_cover_below_which_user_level_is_not_trustworthy(pool_sweep):
    sweep = pool_sweep
    user = _rows(sweep, "user")
    trusted = [c for c in COVERS if user.loc[c, "trusted"]]
    threshold = min(trusted)
    assert threshold == 1.6 and all(user.loc[c, "trusted"] for c in COVERS if c >= threshold)
    before = max(c for c in COVERS if c < threshold)
    text = sweep.answer()
    assert text.startswith(
        f"The user design (randomized by user) stops being trustworthy below "
        f"pools.stock_cover = 1.6 (its CI covers the GTE in "
        f"{user.loc[before, 'coverage']:.0%} of replications at 1.2)")
    recommended = sweep.frame().query("recommended")
    assert set(recommended["pools.stock_cover"]) <= set(COVERS)
    last = recommended[recommended["pools.stock_cover"].isin(AMPLE)]["label"].unique()
    # Few replications: the answer says so, and how many would make the verdicts firm
    # (binomial Monte Carlo SE of coverage; see statistics.trust.replications_for_coverage).
    assert (f"With {sweep.reps} replications" in text) == (sweep.reps < 76)
    core = text.split(" With ")[0]
    if list(last) == ["user"] and len(last) == 1:
        assert core.rstrip(".").endswith("user at pools.stock_cover from 1.6 to 3")


def test_frame_has_one_row_per_point_and_design(pool_sweep):
    sweep = pool_sweep
    frame = sweep.frame()
    assert len(frame) == len(COVERS) * 2
    expected = {"pools.stock_cover", "label", "kind", "estimator", *METRIC_COLUMNS, "gte",
                "gte_se", "recommended", "trusted"}
    assert expected <= set(frame.columns)
    assert frame["recommended"].dtype == bool and frame["trusted"].dtype == bool
    assert list(frame["pools.stock_cover"]) == [c for c in COVERS for _ in range(2)]
    assert list(frame["label"]) == ["user", "cluster-pools"] * len(COVERS)
    assert set(frame["estimator"]) == {"difference_in_means", "hajek_cluster"}
    assert frame.groupby("point")["recommended"].sum().max() <= 1
    for study, (_, rows) in zip(sweep.studies, frame.groupby("point")):
        for row in rows.to_dict("records"):
            m = study.metrics[row["label"]]
            assert row["bias"] == m.bias and row["coverage"] == m.coverage
            assert row["trusted"] == is_trusted(m, alpha=study.scenario.study.alpha)
            assert row["recommended"] == (study.recommendation.label == row["label"])


def test_every_point_uses_the_same_seed(pool_sweep):
    # Invariance: a sweep point is the study of the scenario with the key set, same seed.
    sweep = pool_sweep
    scenario = with_value(sweep.scenario, "pools.stock_cover", 1.1)
    direct = run_study(scenario, reps=60, seed=SEED)
    assert sweep.studies[1].metrics == direct.metrics
    assert all(study.seed == SEED for study in sweep.studies)


def test_write_sweep_csv_reads_back_with_pandas(pool_sweep, tmp_path):
    sweep = pool_sweep
    assert write_sweep(sweep, tmp_path) == [tmp_path / "sweep.csv", tmp_path / "sweep.json"]
    back = pd.read_csv(tmp_path / "sweep.csv")
    frame = sweep.frame()
    assert list(back.columns) == list(frame.columns)
    assert back["label"].tolist() == frame["label"].tolist()
    np.testing.assert_allclose(back[METRIC_COLUMNS].to_numpy(float),
                               frame[METRIC_COLUMNS].to_numpy(float), rtol=1e-12)
    assert back["recommended"].tolist() == frame["recommended"].tolist()
    saved = json.loads((tmp_path / "sweep.json").read_text(encoding="utf-8"))
    assert saved["answer"] == sweep.answer()
    assert [p["values"]["pools.stock_cover"] for p in saved["points"]] == list(COVERS)
    assert [p["recommended"] for p in saved["points"]] == [
        s.recommendation.label for s in sweep.studies]


def test_out_writes_sweep_files_and_one_study_folder_per_point(saved_sweep):
    sweep, out, calls = saved_sweep
    back = pd.read_csv(out / "sweep.csv")
    assert len(back) == 3 * 2 and back["pools.stock_cover"].tolist() == [1, 1, 2, 2, 3, 3]
    assert json.loads((out / "sweep.json").read_text(encoding="utf-8"))["answer"] == \
        sweep.answer()
    for i in range(3):
        summary = json.loads((out / "points" / str(i) / "summary.json").read_text())
        assert summary["reps"] == 6 and summary["seed"] == SEED
        assert summary["scenario_settings"]["pools"]["stock_cover"] == 1.0 + i
    assert calls[-1] == (6 * 3, 6 * 3)
    assert [d for d, _ in calls] == sorted(d for d, _ in calls)


def test_resume_reuses_saved_points(saved_sweep):
    sweep, out, _ = saved_sweep
    again = run_sweep(sweep.scenario, sweep.axes, reps=6, seed=SEED, out=out, resume=True)
    pd.testing.assert_frame_equal(again.frame(), sweep.frame())


def test_two_axis_sweep_answer_and_grid(tmp_path):
    scenario = _toy_scenario(tmp_path, 8, [{"kind": "user"},
                                           {"kind": "cluster", "clusters": "pools"}])
    sweep = run_sweep(scenario, [parse_vary("pools.stock_cover=1.0,3.0"),
                                 parse_vary("effect.lift=0.1,0.4")], reps=20, seed=SEED)
    frame = sweep.frame()
    assert len(frame) == 4 * 2
    assert sweep.points == [{"pools.stock_cover": c, "effect.lift": lift}
                            for c in (1.0, 3.0) for lift in (0.1, 0.4)]
    text = sweep.answer()
    assert "2 x 2 grid of pools.stock_cover and effect.lift" in text
    chosen = frame.query("recommended")["label"].value_counts()
    for label, n in chosen.items():
        assert f"{label} at {n}" in text
    from spillgauge.report.sweep_figures import save_sweep_figures

    paths = save_sweep_figures(sweep, tmp_path / "fig")
    assert [p.name for p in paths] == ["sweep_grid.png"]


def test_figures_and_html_page(pool_sweep, tmp_path):
    import matplotlib.image

    from spillgauge.report.figures import FIGURE_SIZE_PX
    from spillgauge.report.page import CAUTION
    from spillgauge.report.sweep_figures import (
        plot_sweep_metric,
        render_sweep_html,
        save_sweep_figures,
    )

    sweep = pool_sweep
    paths = save_sweep_figures(sweep, tmp_path)
    assert [p.name for p in paths] == ["sweep_bias.png", "sweep_rmse.png", "sweep_coverage.png"]
    for path in paths:
        height, width = matplotlib.image.imread(path).shape[:2]
        assert (width, height) == FIGURE_SIZE_PX
    ax = plot_sweep_metric(sweep.frame(), "pools.stock_cover", "coverage")
    dashed = [line for line in ax.get_lines() if line.get_linestyle() == "--"]
    assert [line.get_ydata()[0] for line in dashed] == [pytest.approx(0.95)]
    page = render_sweep_html(sweep, paths)
    assert page.count("data:image/png;base64,") == 3
    assert CAUTION.replace("'", "&#x27;") in page
    assert "stops being trustworthy below pools.stock_cover = 1.6" in page
    with pytest.raises(ValueError, match="several rows"):
        plot_sweep_metric(pd.concat([sweep.frame()] * 2), "pools.stock_cover", "bias")
