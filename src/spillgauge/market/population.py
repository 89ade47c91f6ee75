"""Users and stock pools: base demand rates, home pools, pre-period history, stock levels.

A population is either generated from the scenario's ``[users]`` and
``[pools]`` keys or read from the user's own CSV files (``users.file``,
``pools.file``), so a study can be calibrated on real data.
"""

from __future__ import annotations

import csv
import re
from dataclasses import dataclass

import numpy as np

from spillgauge.errors import ScenarioError
from spillgauge.scenario import Scenario
from spillgauge.seeding import check_rng

__all__ = ["Population", "build_population", "read_csv_columns", "order_up_to_levels",
           "estimate_rates", "draw_rates"]

HOURS_PER_WEEK = 168.0
_MAX_ORDERS_PER_WEEK = 10_000.0    # bounds on CSV values keep every count far from int64 overflow
_MAX_HISTORY_ORDERS = 1e7
_MAX_STOCK = 1e12
_MAX_BASKET_VALUE = 1e9


def _check_unique(columns: CsvColumns, column: str, field: str) -> None:
    """Refuse a repeated id, naming the id and both of its lines."""
    seen: dict[str, int] = {}
    for value, line in zip(columns[column], columns.lines):
        if value in seen:
            raise ScenarioError(f"{field}:{column} (lines {seen[value]} and {line})",
                                "unique per row", value[:40])
        seen[value] = line


@dataclass(frozen=True, eq=False, slots=True)
class Population:
    """Users and pools of one market.

    Attributes
    ----------
    user_ids : ndarray of str or int, shape (n_users,)
        Users' ids (from the users file; ``0..n-1`` when generated).
    pool_ids : ndarray, shape (n_pools,)
        Pools' ids.
    pool_of_user : ndarray of int, shape (n_users,)
        Home pool index of each user.
    rate_per_hour : ndarray of float, shape (n_users,)
        Base demand rate of each user, orders per hour (before the diurnal rhythm).
    history : ndarray of float, shape (n_users,)
        Orders placed in the pre-period.
    order_up_to : ndarray of int, shape (n_pools,)
        Stock level S each pool is restocked to.
    basket_value : ndarray of float, shape (n_users,), or None
        Value of each of the user's fulfilled orders (the users file's
        ``basket_value`` column); None until the market draws it from
        ``users.basket_value_mean`` and ``basket_value_sd``.
    """

    user_ids: np.ndarray
    pool_ids: np.ndarray
    pool_of_user: np.ndarray
    rate_per_hour: np.ndarray
    history: np.ndarray
    order_up_to: np.ndarray
    basket_value: np.ndarray | None = None

    @property
    def n_users(self) -> int:
        """Number of users."""
        return int(self.pool_of_user.size)

    @property
    def n_pools(self) -> int:
        """Number of pools."""
        return int(self.order_up_to.size)


class CsvColumns(dict):
    """Columns of a CSV file by header name, with the file line of each row in ``lines``."""

    lines: list[int]


_COLUMN_NAME = re.compile(r"[A-Za-z_][A-Za-z0-9_ .-]{0,39}")
_PLAIN_NUMBER = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?")


def _shown_header(header: list[str]) -> str:
    """Name the header's columns, or say it is not one: a file's contents are never echoed."""
    if header and all(_COLUMN_NAME.fullmatch(h) for h in header) and len(header) <= 12:
        return "columns found: " + ", ".join(header)
    return f"the first line is not a header of column names ({len(header)} fields)"


def read_csv_columns(path: str, *, required: tuple[str, ...], optional: tuple[str, ...] = (),
                     field: str) -> CsvColumns:
    """Read a CSV file into columns, checking the header.

    The file is UTF-8, with or without the byte-order mark that spreadsheet
    programs write. Errors name the file's line, never echo its contents.

    Raises
    ------
    ScenarioError
        Naming ``field`` and the missing column, or the unreadable file.
    """
    try:
        with open(path, newline="", encoding="utf-8-sig") as handle:
            reader = csv.reader(handle)
            header = [h.strip() for h in next(reader, [])]
            rows, lines = [], []
            for row in reader:
                if row:
                    rows.append(row)
                    lines.append(reader.line_num)
    except (OSError, UnicodeDecodeError) as exc:
        raise ScenarioError(field, f"a readable UTF-8 CSV file ({exc.__class__.__name__})",
                            path) from None
    except csv.Error as exc:
        raise ScenarioError(f"{field} (line {reader.line_num})",
                            f"a well-formed CSV file ({exc})", path) from None
    for column in required:
        if column not in header:
            raise ScenarioError(f"{field}:{column}", f"a column of the CSV file "
                                f"({_shown_header(header)})", path)
    wanted = [c for c in (*required, *optional) if c in header]
    unknown = [c for c in header if c not in (*required, *optional)]
    if unknown:
        known = ", ".join((*required, *optional))
        if _COLUMN_NAME.fullmatch(unknown[0]):
            raise ScenarioError(f"{field}:{unknown[0]}", f"a known column (one of {known})",
                                unknown[0])
        raise ScenarioError(f"{field} (line 1)", f"a header of known columns (one of {known}; "
                            f"{_shown_header(header)})", path)
    index = {c: header.index(c) for c in wanted}
    columns = CsvColumns({c: [] for c in wanted})
    columns.lines = lines
    for line, row in zip(lines, rows):
        if len(row) != len(header):
            raise ScenarioError(f"{field} (line {line})", f"{len(header)} comma-separated "
                                f"values like the header", f"{len(row)} values")
        for c, i in index.items():
            columns[c].append(row[i].strip())
    if not rows:
        raise ScenarioError(field, "a CSV file with at least one data row", path)
    return columns


def _numbers(columns: CsvColumns, column: str, field: str, *, ids: list[str] | None = None,
             minimum: float = 0.0, maximum: float = 1e12) -> np.ndarray:
    """Return one CSV column as floats; a bad cell is named by its line and user id."""
    values = columns[column]
    out = np.empty(len(values))
    for i, text in enumerate(values):
        value = float(text) if _PLAIN_NUMBER.fullmatch(text) else float("nan")
        if not (minimum <= value <= maximum):
            where = f"line {columns.lines[i]}" + (f", user_id {ids[i][:40]!r}" if ids else "")
            raise ScenarioError(f"{field}:{column} ({where})",
                                f"a number in [{minimum:g}, {maximum:g}]", text[:40])
        out[i] = value
    return out


def estimate_rates(history: np.ndarray, hours: float) -> np.ndarray:
    """Estimate each user's orders per hour from pre-period counts (Gamma-Poisson empirical Bayes).

    Counts ``x_i ~ Poisson(r_i * hours)`` with ``r_i ~ Gamma(shape k, rate b)``; ``k`` and
    ``b`` are fitted by the method of moments (mean m, variance v of the counts:
    ``k = m^2 / (v - m)``, ``b = k * hours / m``), and each rate is its posterior mean
    ``(k + x_i) / (b + hours)`` (Morris 1983, parametric empirical Bayes). A user who
    ordered nothing keeps a small positive rate. When the counts show no
    over-dispersion (``v <= m``) every user gets the pooled rate ``m / hours``.

    Counts 0, 2, 4 over 10 hours (m = 2, v = 4, so k = 2, b = 10) shrink halfway to the mean:

    >>> estimate_rates(np.array([0.0, 2.0, 4.0]), 10.0).round(4).tolist()
    [0.1, 0.2, 0.3]
    """
    shape, rate = _gamma_prior(history, hours)
    if shape is None:
        return np.full_like(np.asarray(history, dtype=float), rate)
    return (shape + history) / (rate + hours)


def _gamma_prior(history: np.ndarray, hours: float) -> tuple[float | None, float]:
    """Fit the Gamma prior of the rates by moments; ``(None, pooled rate)`` without dispersion."""
    history = np.asarray(history, dtype=float)
    mean, variance = history.mean(), history.var(ddof=1) if history.size > 1 else 0.0
    if mean <= 0 or variance <= mean:
        return None, max(mean, 0.0) / hours
    shape = mean * mean / (variance - mean)
    return shape, shape * hours / mean


def draw_rates(history: np.ndarray, hours: float, *, rng: np.random.Generator) -> np.ndarray:
    """Draw each user's orders per hour from its Gamma posterior given pre-period counts.

    Same model as :func:`estimate_rates`, but each rate is a draw from
    ``Gamma(k + x_i, rate b + hours)`` rather than its mean, so the simulated
    market keeps the full spread of rates (posterior means shrink it by the
    factor ``(v - m) / v``) and the pre-period stays as correlated with the
    experiment as it really is.
    """
    check_rng(rng)
    history = np.asarray(history, dtype=float)
    shape, rate = _gamma_prior(history, hours)
    if shape is None:
        return np.full_like(history, rate)
    return rng.gamma(shape + history, 1.0 / (rate + hours))


def order_up_to_levels(rate_per_hour: np.ndarray, pool_of_user: np.ndarray, n_pools: int,
                       stock_cover: float, restock_every_hours: int) -> np.ndarray:
    """Return S_k = ceil(stock_cover x pool k's expected all-control demand per restock cycle).

    Examples
    --------
    >>> order_up_to_levels(np.array([0.5, 0.25, 1.0]), np.array([0, 0, 1]), 2, 1.5, 4).tolist()
    [5, 6]
    """
    expected = np.bincount(pool_of_user, weights=rate_per_hour, minlength=n_pools)
    return np.ceil(stock_cover * expected * restock_every_hours - 1e-9).astype(np.int64)


def build_population(scenario: Scenario, *, rng: np.random.Generator) -> Population:
    """Build the users and pools of a scenario.

    Generated users get a home pool uniformly at random and a base rate
    ``orders_per_week * G_i * M_pool / 168`` per hour, with ``G_i ~ Gamma(shape,
    1/shape)`` (mean 1) and ``M_pool`` a lognormal pool multiplier with sigma
    ``pools.demand_spread``, normalised so the users' mean multiplier is 1.
    Pre-period history is ``Poisson(rate * history_days * 24)`` (no treatment,
    no stock-outs).
    """
    check_rng(rng)
    users, pools = scenario.users, scenario.pools
    pool_ids, order_up_to, basket_value = None, None, None
    if pools.file is not None:
        columns = read_csv_columns(pools.file, required=("pool_id",), optional=("order_up_to",),
                                   field="pools.file")
        pool_ids = np.array(columns["pool_id"])
        _check_unique(columns, "pool_id", "pools.file")
        if "order_up_to" in columns:
            levels = _numbers(columns, "order_up_to", "pools.file", maximum=_MAX_STOCK)
            fractional = np.flatnonzero(levels != np.round(levels))
            if fractional.size:
                k = int(fractional[0])
                raise ScenarioError(f"pools.file:order_up_to (line {columns.lines[k]})",
                                    "a whole number", columns["order_up_to"][k][:40])
            order_up_to = levels.astype(np.int64)
    if users.file is not None:
        columns = read_csv_columns(users.file, required=("user_id", "pool_id"),
                                   optional=("orders_per_week", "history_orders",
                                             "basket_value"), field="users.file")
        if "orders_per_week" not in columns and "history_orders" not in columns:
            raise ScenarioError("users.file:orders_per_week", "a column of the CSV file (or give "
                                "history_orders to estimate rates from the pre-period)",
                                users.file)
        user_ids = np.array(columns["user_id"])
        _check_unique(columns, "user_id", "users.file")
        ids = columns["user_id"]
        home = np.array(columns["pool_id"])
        if pool_ids is None:
            pool_ids = np.unique(home)
        lookup = {pid: k for k, pid in enumerate(pool_ids.tolist())}
        missing = [k for k, p in enumerate(home.tolist()) if p not in lookup]
        if missing:
            k = missing[0]
            raise ScenarioError(f"users.file:pool_id (line {columns.lines[k]}, user_id "
                                f"{ids[k][:40]!r})", "a pool_id listed in pools.file",
                                home[k][:40])
        pool_of_user = np.array([lookup[p] for p in home.tolist()], dtype=np.int64)
        if "basket_value" in columns:
            basket_value = _numbers(columns, "basket_value", "users.file", ids=ids,
                                    maximum=_MAX_BASKET_VALUE)
        if "orders_per_week" in columns:
            rate = _numbers(columns, "orders_per_week", "users.file", ids=ids,
                            maximum=_MAX_ORDERS_PER_WEEK) / HOURS_PER_WEEK
            history = (_numbers(columns, "history_orders", "users.file", ids=ids,
                                maximum=_MAX_HISTORY_ORDERS)
                       if "history_orders" in columns else
                       rng.poisson(rate * users.history_days * 24.0).astype(float))
        else:
            history = _numbers(columns, "history_orders", "users.file", ids=ids,
                               maximum=_MAX_HISTORY_ORDERS)
            if users.history_days < 1:
                raise ScenarioError("users.history_days", "the length of the pre-period "
                                    "(>= 1) when rates are estimated from history_orders",
                                    users.history_days)
            rate = draw_rates(history, users.history_days * 24.0, rng=rng)
    else:
        if pool_ids is None:
            pool_ids = np.arange(pools.count)
        n_pools = pool_ids.size
        user_ids = np.arange(users.count)
        pool_of_user = rng.integers(0, n_pools, size=users.count)
        heterogeneity = rng.gamma(users.rate_shape, 1.0 / users.rate_shape, size=users.count)
        pool_level = np.exp(pools.demand_spread * rng.standard_normal(n_pools))
        pool_level /= pool_level[pool_of_user].mean()
        rate = users.orders_per_week * heterogeneity * pool_level[pool_of_user] / HOURS_PER_WEEK
        history = rng.poisson(rate * users.history_days * 24.0).astype(float)
    n_pools = pool_ids.size
    # Users are kept sorted by home pool: the engine's order events then come out
    # grouped by pool, which keeps its gathers and sorts cache-friendly.
    order = np.argsort(pool_of_user, kind="stable")
    user_ids, pool_of_user, rate, history = (a[order] for a in (user_ids, pool_of_user, rate,
                                                                 history))
    if basket_value is not None:
        basket_value = basket_value[order]
    if users.file is None:
        user_ids = np.arange(user_ids.size)
    if order_up_to is None:
        order_up_to = order_up_to_levels(rate, pool_of_user, n_pools, pools.stock_cover,
                                         pools.restock_every_hours)
    return Population(user_ids=user_ids, pool_ids=pool_ids, pool_of_user=pool_of_user,
                      rate_per_hour=rate, history=history, order_up_to=order_up_to,
                      basket_value=basket_value)
