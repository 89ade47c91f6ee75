"""Opt-in launch: users choose themselves whether to take the treatment; nobody randomizes.

Not a randomized design: heavy buyers opt in more, so the arms differ before
treatment. Its estimand is the effect on the treated (ATT), whose truth comes from
the launch's own world (exactly the opted-in users treated) against the
all-control world on the same random numbers.
"""

from __future__ import annotations

import numpy as np
from scipy import optimize, special

from spillgauge.designs.kind import DesignKind, MarketView
from spillgauge.panel import OutcomePanel
from spillgauge.scenario import DesignSpec, Scenario
from spillgauge.scenario.keys import DesignKey, check
from spillgauge.schedule import AssignmentSchedule
from spillgauge.seeding import check_rng

__all__ = ["draw_opt_in_schedule", "opt_in_probabilities", "OptIn", "SELECTION_TRAITS",
           "OPT_IN_ESTIMATORS"]

SELECTION_TRAITS = ("history", "rate")
OPT_IN_ESTIMATORS = {"naive": "difference_in_means", "matching": "propensity_score_matching",
                     "ipw": "inverse_probability_weighting",
                     "aipw": "augmented_inverse_probability_weighting"}


def opt_in_probabilities(trait: np.ndarray, *, take_up: float, selection: float) -> np.ndarray:
    """Return each user's probability of opting in, shape ``(n_users,)``.

    ``p_i = expit(a + selection * z_i)`` with ``z_i`` the trait standardized over
    users and ``a`` solved (Brent's method) so that the mean of ``p_i`` is
    ``take_up``. With ``selection = 0`` (or a constant trait) every ``p_i`` is
    ``take_up``.

    >>> opt_in_probabilities(np.array([1.0, 2.0, 3.0]), take_up=0.3, selection=0.0).tolist()
    [0.3, 0.3, 0.3]
    >>> p = opt_in_probabilities(np.array([0.0, 1.0, 5.0]), take_up=0.4, selection=2.0)
    >>> round(float(p.mean()), 12), bool(p[2] > p[0])
    (0.4, True)
    """
    trait = np.asarray(trait, dtype=float)
    sd = trait.std()
    if selection == 0 or sd == 0:
        return np.full(trait.size, float(take_up))
    slope = selection * (trait - trait.mean()) / sd
    intercept = optimize.brentq(lambda a: special.expit(a + slope).mean() - take_up,
                                -50.0, 50.0, xtol=1e-14)
    return special.expit(intercept + slope)


def draw_opt_in_schedule(trait: np.ndarray, n_ticks: int, *, take_up: float, selection: float,
                         rng: np.random.Generator) -> AssignmentSchedule:
    """Draw who opts in: each user on its own draw with :func:`opt_in_probabilities`.

    The opted-in users are treated over the whole horizon. ``treated_probability``
    is ``take_up`` (the mean opt-in probability).

    >>> s = draw_opt_in_schedule(np.arange(1000.0), 24, take_up=0.3, selection=1.0,
    ...                          rng=np.random.default_rng(0))
    >>> s.unit_kind, bool(abs(s.user_is_treated().mean() - 0.3) < 0.06)
    ('user', True)
    """
    check_rng(rng)
    probability = opt_in_probabilities(trait, take_up=take_up, selection=selection)
    opted = rng.random(probability.size) < probability
    return AssignmentSchedule(unit_of_user=np.arange(probability.size), is_treated=opted[:, None],
                              period_start_ticks=np.zeros(1, dtype=np.int64), n_ticks=n_ticks,
                              treated_probability=float(take_up), unit_kind="user",
                              randomization="bernoulli")


class OptIn(DesignKind):
    """Users opt in themselves; analysed naively, by matching, IPW or AIPW, against the ATT."""

    name = "opt_in"
    summary = ("users choose themselves (not randomized): heavier buyers opt in more; "
               "judged against the effect on those who opted in (ATT)")
    keys = (
        DesignKey(name="take_up", type=float, default=0.3, minimum=0, maximum=1,
                  exclusive_minimum=True, exclusive_maximum=True,
                  doc="expected share of users who opt in"),
        DesignKey(name="selection", type=float, default=1.0, minimum=-5, maximum=5,
                  doc="log-odds of opting in per SD of the selection trait (0 = as good as "
                      "random)"),
        DesignKey(name="selection_on", type=str, default="history", choices=SELECTION_TRAITS,
                  doc="`\"history\"`: the user's pre-period orders (observed, so adjustment "
                      "can remove it; needs `users.history_days > 0`); `\"rate\"`: the user's "
                      "true base rate (history is only a noisy proxy: hidden confounding)"),
        DesignKey(name="estimator", type=str, default="matching",
                  choices=tuple(OPT_IN_ESTIMATORS),
                  doc="`\"naive\"` (opted in vs not), `\"matching\"` (nearest neighbour on the "
                      "logit propensity score, caliper 0.2 SD), `\"ipw\"` or `\"aipw\"`"),
    )
    shown_keys = ("take_up", "selection", "selection_on", "estimator")
    estimand = "att"
    question = "the effect on the users who opted in (ATT)"
    is_recommendable = False
    is_randomized = False

    def check(self, spec: DesignSpec, scenario: Scenario) -> None:
        if spec.selection_on == "history":
            check(scenario.users.history_days > 0, f"{spec.at}.selection_on",
                  "'rate' when users.history_days = 0 (selection on history needs a "
                  "pre-period)", spec.selection_on)

    def default_label(self, spec: DesignSpec) -> str:
        return f"opt-in-{spec.estimator}"

    def describe_unit(self, spec: DesignSpec) -> str:
        return f"user, self-selected on {spec.selection_on} (not randomized)"

    def estimator_name(self, spec: DesignSpec) -> str:
        return OPT_IN_ESTIMATORS[spec.estimator]

    def draw(self, market: MarketView, spec: DesignSpec, *, rng: np.random.Generator
             ) -> AssignmentSchedule:
        trait = market.history if spec.selection_on == "history" else market.rate_per_hour
        return draw_opt_in_schedule(trait, market.n_ticks, take_up=spec.take_up,
                                    selection=spec.selection, rng=rng)

    def truth(self, spec: DesignSpec, schedule: AssignmentSchedule, panel: OutcomePanel,
              control: OutcomePanel) -> tuple[float, float]:
        """ATT: mean over opted-in users of launch minus all-control fulfilled orders;
        side effect: the same mean over users who did not opt in."""
        gain = panel.user_outcome() - control.user_outcome()
        opted = schedule.user_is_treated()

        def mean(values: np.ndarray) -> float:
            return float(values.mean()) if values.size else float("nan")

        return mean(gain[opted]), mean(gain[~opted])

    def truth_control_mean(self, spec: DesignSpec, schedule: AssignmentSchedule,
                           control: OutcomePanel) -> float:
        """Mean over opted-in users of their all-control outcome over the horizon."""
        opted = schedule.user_is_treated()
        return float(control.user_outcome()[opted].mean()) if opted.any() else float("nan")
