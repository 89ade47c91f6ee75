"""The estimand: the global treatment effect from the two counterfactual worlds."""

from __future__ import annotations

from dataclasses import asdict, dataclass

import numpy as np

from spillgauge.panel import OutcomePanel

__all__ = ["ReplicationTruth", "TruthSummary", "replication_truth", "summarise_truth"]


@dataclass(frozen=True, slots=True)
class ReplicationTruth:
    """The two counterfactual worlds of one replication, in per-user means over the horizon.

    ``gte`` is the realised global treatment effect: the mean outcome per user
    (``[study] outcome``: fulfilled orders by default) when everyone is treated
    minus when no one is; ``control_mean`` and ``treated_mean`` are in the
    outcome, ``gte_relative = gte / control_mean``. Demanded orders and fill
    rates are in orders whatever the outcome (``*_orders``: fulfilled orders).
    """

    gte: float
    control_mean: float
    treated_mean: float
    control_demanded: float
    treated_demanded: float
    control_fill_rate: float
    treated_fill_rate: float
    gte_relative: float = float("nan")
    control_orders: float = float("nan")
    treated_orders: float = float("nan")

    def to_dict(self) -> dict:
        """Return the fields as plain floats."""
        return asdict(self)


def _fill_rate(fulfilled: float, demanded: float) -> float:
    return float(fulfilled / demanded) if demanded > 0 else float("nan")


def replication_truth(control: OutcomePanel, treated: OutcomePanel) -> ReplicationTruth:
    """Return the truth of one replication from its all-control and all-treated worlds.

    Examples
    --------
    >>> c = OutcomePanel.from_arrays(fulfilled=np.array([1, 1]), demanded=np.array([2, 1]))
    >>> t = OutcomePanel.from_arrays(fulfilled=np.array([2, 1]), demanded=np.array([2, 2]))
    >>> replication_truth(c, t).gte, replication_truth(c, t).control_fill_rate
    (0.5, 0.6666666666666666)
    """
    c_ful, t_ful = control.user_fulfilled().mean(), treated.user_fulfilled().mean()
    c_dem, t_dem = control.user_demanded().mean(), treated.user_demanded().mean()
    c_out, t_out = control.user_outcome().mean(), treated.user_outcome().mean()
    gte = float(t_out - c_out)
    return ReplicationTruth(gte=gte, control_mean=float(c_out),
                            treated_mean=float(t_out), control_demanded=float(c_dem),
                            treated_demanded=float(t_dem),
                            control_fill_rate=_fill_rate(c_ful, c_dem),
                            treated_fill_rate=_fill_rate(t_ful, t_dem),
                            gte_relative=gte / float(c_out) if c_out > 0 else float("nan"),
                            control_orders=float(c_ful), treated_orders=float(t_ful))


@dataclass(frozen=True, slots=True)
class TruthSummary:
    """The truth over replications: means, with the GTE's Monte Carlo standard error.

    ``*_lost_share`` is the share of demanded orders that went unfilled;
    ``gte_relative`` is the mean of the replications' relative GTEs.
    """

    reps: int
    gte: float
    gte_se: float
    control_mean: float
    treated_mean: float
    control_demanded: float
    treated_demanded: float
    control_fill_rate: float
    treated_fill_rate: float
    control_lost_share: float
    treated_lost_share: float
    gte_relative: float = float("nan")
    gte_relative_se: float = float("nan")
    control_orders: float = float("nan")
    treated_orders: float = float("nan")

    def to_dict(self) -> dict:
        """Return the fields as plain numbers."""
        return asdict(self)


def summarise_truth(truths: list[ReplicationTruth]) -> TruthSummary:
    """Average replications' truths; ``gte_se`` is SD / sqrt(reps) (NaN for one replication).

    Fill rates are ratios of the mean fulfilled to the mean demanded orders.
    """
    if not truths:
        raise ValueError("no replications to summarise")
    table = {k: np.array([getattr(t, k) for t in truths]) for k in ReplicationTruth.__slots__}
    reps = len(truths)
    gte_se = float(table["gte"].std(ddof=1) / np.sqrt(reps)) if reps > 1 else float("nan")
    mean = {k: float(v.mean()) for k, v in table.items()}
    orders = {arm: mean[f"{arm}_orders"] if np.isfinite(mean[f"{arm}_orders"])
              else mean[f"{arm}_mean"] for arm in ("control", "treated")}  # older records
    c_fill = _fill_rate(orders["control"], mean["control_demanded"])
    t_fill = _fill_rate(orders["treated"], mean["treated_demanded"])
    relative = table["gte_relative"]
    relative_se = float(relative.std(ddof=1) / np.sqrt(reps)) if reps > 1 else float("nan")
    return TruthSummary(reps=reps, gte=mean["gte"], gte_se=gte_se,
                        control_mean=mean["control_mean"], treated_mean=mean["treated_mean"],
                        control_demanded=mean["control_demanded"],
                        treated_demanded=mean["treated_demanded"],
                        control_fill_rate=c_fill, treated_fill_rate=t_fill,
                        control_lost_share=1.0 - c_fill, treated_lost_share=1.0 - t_fill,
                        gte_relative=mean["gte_relative"], gte_relative_se=relative_se,
                        control_orders=orders["control"], treated_orders=orders["treated"])
