"""The command line: parse, load, call the study functions, write. No numerics here."""

from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

from spillgauge.console import (
    REPS,
    SEED,
    WORKERS,
    ProgressBar,
    fail,
    interrupted,
    new_file_place,
    out_folder,
)
from spillgauge.errors import ScenarioError, SpillgaugeError
from spillgauge.files import folder_lock
from spillgauge.formatting import wrap_text

__all__ = ["main", "build_parser"]


class _Parser(argparse.ArgumentParser):
    """An argument parser whose errors are one line and exit with 2."""

    def error(self, message: str) -> None:  # noqa: D401 - argparse's hook
        self.exit(2, f"{self.prog}: error: {message} (see --help)\n")


def _load(path: str):
    from spillgauge.bundled import find_scenario
    from spillgauge.scenario.reading import load_scenario

    return load_scenario(find_scenario(path))


def _cmd_check(args) -> int:
    from spillgauge.market.build import build_market
    from spillgauge.report.text import market_text
    from spillgauge.study.market_summary import summarise_market
    from spillgauge.study.resources import check_memory

    scenario = _load(args.scenario)
    check_memory(scenario, market_only=True)
    market = build_market(scenario, args.seed)
    print(market_text(scenario, summarise_market(market)))
    return 0


def _cmd_truth(args) -> int:
    from spillgauge.report.text import truth_text
    from spillgauge.study.run import run_truth

    scenario = _load(args.scenario)
    bar = ProgressBar("truth", enabled=not args.quiet and not args.json, forced=args.progress)
    truth = run_truth(scenario, reps=args.reps, seed=args.seed, workers=args.workers,
                      scheduler=args.scheduler, progress=bar)
    seed = scenario.study.seed if args.seed is None else args.seed
    if args.json:
        from spillgauge.files import dumps

        print(dumps({"scenario": scenario.name, "seed": seed, **truth.to_dict()}))
    else:
        print(truth_text(scenario.name, seed, truth, scenario.study.outcome))
    return 0


def _cmd_run(args) -> int:
    from spillgauge.report import write_report
    from spillgauge.report.text import study_text
    from spillgauge.study.run import run_study

    scenario = _load(args.scenario)
    out = out_folder(args.out, Path("results") / scenario.name)
    bar = ProgressBar(scenario.name, enabled=not args.quiet, forced=args.progress)
    with folder_lock(out):  # held until the report is written
        try:
            study = run_study(scenario, reps=args.reps, seed=args.seed, workers=args.workers,
                              scheduler=args.scheduler, out=out, resume=args.resume,
                              progress=bar)
        except KeyboardInterrupt:
            bar.close()
            return interrupted(out)
        written = write_report(study, out)
    print(study_text(study))
    print("\n" + wrap_text(f"results: {out}/ ({', '.join(written)})", indent="  "))
    return 0


def _add_common(p: argparse.ArgumentParser, *, reps: bool = True) -> None:
    p.add_argument("scenario", help="a scenario TOML file, or the name of a bundled scenario "
                   "(see `spillgauge list`)")
    if reps:
        p.add_argument("--reps", type=REPS, metavar="N",
                       help="replications (default: the scenario's study.reps)")
    p.add_argument("--seed", type=SEED, metavar="S",
                   help="study seed (default: the scenario's study.seed)")


def _add_compute(p: argparse.ArgumentParser) -> None:
    p.add_argument("--workers", type=WORKERS, metavar="N", default=None,
                   help="local processes for the replications (default: every core)")
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="run replications on this Dask scheduler, e.g. tcp://10.0.0.5:8786 "
                   "(needs the 'dask' extra)")
    shown = p.add_mutually_exclusive_group()
    shown.add_argument("--quiet", action="store_true", help="no progress bar")
    shown.add_argument("--progress", action="store_true",
                       help="show the progress bar even when stderr is not a terminal")


def _add_experiment(p: argparse.ArgumentParser) -> None:
    _add_common(p, reps=False)
    p.add_argument("--design", required=True, metavar="LABEL",
                   help="a design label of the scenario (as `spillgauge run` prints it)")
    p.add_argument("--start", metavar="DATE", help="the midnight the experiment starts, "
                   "YYYY-MM-DD (default: the next midnight)")
    p.add_argument("--out", required=True, metavar="DIR", help="folder for the files")


def _cmd_report(args) -> int:
    from spillgauge.report import write_report
    from spillgauge.report.text import study_text
    from spillgauge.study.store import load_study

    out = Path(args.dir)
    study = load_study(out)
    with folder_lock(out):
        written = write_report(study, out)
    print(study_text(study))
    print("\n" + wrap_text(f"re-rendered {out}/ ({', '.join(written)}) from {study.reps} saved "
                          "replications", indent="  "))
    return 0


def _cmd_demo(args) -> int:
    from spillgauge.bundled import DEFAULT_SCENARIO

    args.scenario = DEFAULT_SCENARIO
    args.resume = False
    return _cmd_run(args)


def _cmd_new(args) -> int:
    from spillgauge.bundled import new_scenario_text

    name = Path(args.name).stem
    path = Path(args.name if args.name.endswith(".toml") else f"{args.name}.toml")
    text = new_scenario_text(name)
    if not path.parent.is_dir():
        raise ScenarioError("NAME", f"a file in an existing folder (no folder {str(path.parent)!r})",
                            args.name)
    new_file_place(path, allow_outside=args.allow_outside)
    if path.exists() and not args.force:
        raise ScenarioError("NAME", "a file that does not exist yet (use --force to overwrite)",
                            str(path))
    try:
        path.write_text(text, encoding="utf-8")
    except OSError as exc:
        raise ScenarioError("NAME", f"a file that can be written ({exc.strerror})",
                            str(path)) from None
    print(f"wrote {path}: edit it, then `spillgauge check {path}` and `spillgauge run {path}`")
    return 0


def _cmd_sweep(args) -> int:
    from spillgauge.files import write_atomic
    from spillgauge.report.sweep_figures import render_sweep_html, save_sweep_figures
    from spillgauge.sweep.sweep import parse_vary, run_sweep, write_sweep

    scenario = _load(args.scenario)
    axes = [parse_vary(text) for text in args.vary]
    if len(axes) > 2:
        raise ScenarioError("--vary", "given once (curves) or twice (a grid)", len(axes))
    if len({a.key for a in axes}) != len(axes):
        raise ScenarioError("--vary", "two different keys", " and ".join(a.key for a in axes))
    out = out_folder(args.out, Path("results") / f"{scenario.name}-sweep")
    bar = ProgressBar(f"{scenario.name} sweep", enabled=not args.quiet, forced=args.progress)
    with folder_lock(out):  # held until every file is written
        try:
            sweep = run_sweep(scenario, axes, reps=args.reps, seed=args.seed,
                              workers=args.workers, scheduler=args.scheduler, out=out,
                              resume=args.resume, progress=bar)
        except KeyboardInterrupt:
            bar.close()
            return interrupted(out)
        written = [p.name for p in write_sweep(sweep, out)]
        figures = save_sweep_figures(sweep, out)
        write_atomic(out / "sweep.html", render_sweep_html(sweep, figures))
    written += [p.name for p in figures] + ["sweep.html"]
    print(wrap_text(sweep.answer()))
    print("\n" + wrap_text(f"results: {out}/ ({', '.join(written)})", indent="  "))
    return 0


def _cmd_plan(args) -> int:
    from spillgauge.files import dumps, write_atomic
    from spillgauge.plan import plan_study, write_plan
    from spillgauge.plan.figures import save_plan_figures
    from spillgauge.report.plan_page import render_plan_html

    if args.scheduler:
        raise ScenarioError("--scheduler", "left out: plan runs on local processes (--workers)",
                            args.scheduler)
    scenario = _load(args.scenario)
    out = out_folder(args.out, Path("results") / f"{scenario.name}-plan")
    bar = ProgressBar(f"{scenario.name} plan", enabled=not args.quiet and not args.json,
                      forced=args.progress)
    with folder_lock(out):  # held until plan.html is written
        try:
            plan = plan_study(scenario, days=args.days, power=args.power, alpha=args.alpha,
                              reps=args.reps, seed=args.seed, workers=args.workers,
                              progress=bar, out=out, resume=args.resume)
        except KeyboardInterrupt:
            bar.close()
            return interrupted(out)
        written = write_plan(plan, out)
        figures = save_plan_figures(plan, out)
        write_atomic(out / "plan.html", render_plan_html(plan, figures))
    if args.json:
        print(dumps(plan.to_dict()))
        return 0
    print(wrap_text(plan.answer()))
    names = [p.name for p in [*written, *figures]] + ["plan.html"]
    print("\n" + wrap_text(f"results: {out}/ ({', '.join(names)})", indent="  "))
    return 0


def _cmd_list(args) -> int:
    from spillgauge.bundled import bundled_scenarios
    from spillgauge.scenario.reading import load_scenario

    for path in bundled_scenarios():
        scenario = load_scenario(path)
        summary = " ".join(scenario.description.split())
        print(wrap_text(f"{scenario.name:<14} {summary}", indent=" " * 15))
    return 0


def _cmd_assign(args) -> int:
    from spillgauge.experiment.assignment import assign_design
    from spillgauge.experiment.balance import assignment_balance, balance_text
    from spillgauge.experiment.folder import write_assignment

    scenario = _load(args.scenario)
    assignment = assign_design(scenario, args.design, seed=args.seed, start=args.start)
    written = write_assignment(assignment, args.out)
    schedule = assignment.schedule
    print(wrap_text(f"{assignment.spec.label}: {assignment.describe()}; seed {assignment.seed}"))
    print(balance_text(assignment_balance(schedule, assignment.history), schedule.unit_kind))
    print("\n" + wrap_text(f"wrote {args.out}/ ({', '.join(p.name for p in written)})",
                          indent="  "))
    print(f"after the experiment: spillgauge analyze {args.out} --orders ORDERS.csv")
    return 0


def _cmd_simulate(args) -> int:
    from spillgauge.experiment.simulate import simulate_experiment, write_experiment
    from spillgauge.formatting import OUTCOME_UNITS, format_number

    scenario = _load(args.scenario)
    experiment = simulate_experiment(scenario, args.design, seed=args.seed, start=args.start)
    written = write_experiment(experiment, args.out)
    truth, assignment = experiment.truth, experiment.assignment
    print(wrap_text(f"{assignment.spec.label}: one synthetic experiment, seed {assignment.seed}; "
                    f"true effect (GTE) {format_number(truth.gte, sign=True)} "
                    f"{OUTCOME_UNITS[assignment.outcome]} ({format_number(truth.control_mean)} "
                    f"all control, {format_number(truth.treated_mean)} all treated)"))
    print(wrap_text(f"wrote {args.out}/ ({', '.join(p.name for p in written)})", indent="  "))
    print(f"next: spillgauge analyze {args.out}")
    return 0


def _cmd_analyze(args) -> int:
    from spillgauge.experiment.analyze import analysis_record, analysis_text, analyze_experiment

    analysis = analyze_experiment(args.dir, orders=args.orders, study=args.study)
    if args.json:
        from spillgauge.files import dumps

        print(dumps(analysis_record(analysis)))
    else:
        print(analysis_text(analysis))
    return 0


def build_parser() -> argparse.ArgumentParser:
    """Return the parser of the ``spillgauge`` command."""
    parser = _Parser(prog="spillgauge", description=(
        "Simulate your market with interference (shared stock, a social graph, carryover), "
        "run candidate experiment designs in it many times against the true global "
        "treatment effect, and recommend a randomization unit."))
    from spillgauge import __version__

    parser.add_argument("--version", action="version", version=f"spillgauge {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True

    p = sub.add_parser("check", help="validate a scenario and describe its market",
                       description="Validate a scenario file and print its market: users, "
                       "pools, graph degree and clustering, stock per pool against expected "
                       "demand, cluster counts.")
    _add_common(p, reps=False)
    p.set_defaults(func=_cmd_check)

    p = sub.add_parser("truth", help="the true global treatment effect (GTE)",
                       description="Run the all-control and all-treated worlds on common "
                       "random numbers and print the GTE with its Monte Carlo standard error, "
                       "both worlds' orders, fill rates and lost-order shares.")
    _add_common(p)
    _add_compute(p)
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=_cmd_truth)

    p = sub.add_parser("run", help="run the study and recommend a randomization unit",
                       description="Run every design of the scenario against the truth over "
                       "many replications; write summary.json, replications.csv and the "
                       "reports; print the design table and the recommendation.")
    _add_common(p)
    _add_compute(p)
    p.add_argument("--out", metavar="DIR", help="results folder (default results/<scenario name>)")
    p.add_argument("--resume", action="store_true",
                   help="continue an interrupted run from the replications saved in DIR")
    p.set_defaults(func=_cmd_run)

    p = sub.add_parser("sweep", help="run the study along one or two scenario keys",
                       description="Run the study at each value of one numeric scenario key "
                       "(curves) or on a grid of two, and say where each design can be trusted "
                       "and which is recommended. Writes sweep.csv, sweep.json, plots and "
                       "sweep.html. Every point uses the same seed.")
    _add_common(p)
    _add_compute(p)
    p.add_argument("--vary", action="append", required=True, metavar="KEY=START:STOP:N",
                   help="a dotted numeric key and its values, e.g. pools.stock_cover=0.8:2:7, "
                   "effect.peer_lift=0,0.2,0.5 or design.<label>.block_hours=6:48:4; "
                   "give it twice for a grid")
    p.add_argument("--out", metavar="DIR",
                   help="results folder (default results/<scenario name>-sweep)")
    p.add_argument("--resume", action="store_true",
                   help="continue an interrupted sweep from what DIR holds")
    p.set_defaults(func=_cmd_sweep)

    p = sub.add_parser("plan", help="how long to run, and what each design can detect",
                       description="Run the study once and analyse every design at each "
                       "duration as the first days of the same worlds: power at the scenario's "
                       "effect, minimum detectable effect, bias, coverage and trust; answer "
                       "with the shortest duration at which a trusted design reaches the "
                       "target power. Writes plan.csv, plan.json, plots and plan.html.")
    _add_common(p)
    _add_compute(p)
    p.add_argument("--days", metavar="D,D,...",
                   help="durations in days, e.g. 7,14,21,28 (default: whole weeks and the "
                   "horizon; each at most calendar.days)")
    p.add_argument("--power", type=float, default=0.8, metavar="P",
                   help="target power (default 0.8)")
    p.add_argument("--alpha", type=float, metavar="A",
                   help="level of the tests (default: the scenario's study.alpha)")
    p.add_argument("--out", metavar="DIR", help="results folder (default results/<name>-plan)")
    p.add_argument("--resume", action="store_true",
                   help="continue an interrupted plan from the replications DIR holds")
    p.add_argument("--json", action="store_true", help="print plan.json to stdout")
    p.set_defaults(func=_cmd_plan)

    p = sub.add_parser("report", help="re-render the reports of a results folder",
                       description="Rebuild summary.txt, summary.md, the plots and "
                       "report.html from the replications saved in DIR, without simulating.")
    p.add_argument("dir", metavar="DIR", help="a results folder written by `spillgauge run`")
    p.set_defaults(func=_cmd_report)

    p = sub.add_parser("demo", help="run the default scenario end to end",
                       description="Run the bundled default scenario (tight_pantry) and write "
                       "its results and report to results/tight_pantry.")
    p.add_argument("--reps", type=REPS, metavar="N", help="replications (default 200)")
    p.add_argument("--seed", type=SEED, metavar="S", help="study seed")
    p.add_argument("--out", metavar="DIR", help="results folder")
    _add_compute(p)
    p.set_defaults(func=_cmd_demo)

    p = sub.add_parser("new", help="write a commented scenario file to start from",
                       description="Write NAME.toml: a commented scenario with every section, "
                       "to edit into a copy of your own market.")
    p.add_argument("name", metavar="NAME", help="scenario name (the file is NAME.toml)")
    p.add_argument("--force", action="store_true", help="overwrite an existing file")
    p.add_argument("--allow-outside", action="store_true",
                   help="write outside the current folder (never into a system folder such "
                        "as /etc or /usr)")
    p.set_defaults(func=_cmd_new)

    p = sub.add_parser("assign", help="draw a design's randomization for your market",
                       description="Draw the real experiment's assignment of one of the "
                       "scenario's designs (the same draw as replication 0 of a study with "
                       "the same seed), with the users' ids from the scenario's CSV files. "
                       "Writes assignment.json, assignment.csv and calendar.csv; prints the "
                       "balance of pre-period orders by arm.")
    _add_experiment(p)
    p.set_defaults(func=_cmd_assign)

    p = sub.add_parser("simulate", help="one synthetic experiment with its known answer",
                       description="Simulate one experiment of a design as real data would "
                       "look: the assignment files, orders.csv (user, day), stock.csv (pool, "
                       "day), pool_orders.csv (pool, hour; designs whose arms change over "
                       "time) and truth.json (the GTE and both counterfactual worlds).")
    _add_experiment(p)
    p.set_defaults(func=_cmd_simulate)

    p = sub.add_parser("analyze", help="analyse an experiment's orders with the design's "
                       "estimator", description="Read an assignment folder and the "
                       "experiment's orders, and print the design's own estimate, standard "
                       "error, interval and p-value (with a study's measured bias, coverage "
                       "and power for the design when --study is given).")
    p.add_argument("dir", metavar="DIR", help="a folder written by `spillgauge assign` or "
                   "`spillgauge simulate`")
    p.add_argument("--orders", metavar="FILE", help="the orders CSV (default DIR/orders.csv, "
                   "or DIR/pool_orders.csv for designs whose arms change over time); with "
                   "the outcome revenue each row needs `revenue`, and pool rows for "
                   "conversion need `conversions`")
    p.add_argument("--study", metavar="DIR", help="a results folder of `spillgauge run` on "
                   "the same scenario, for context")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.set_defaults(func=_cmd_analyze)

    p = sub.add_parser("list", help="list the bundled scenarios")
    p.set_defaults(func=_cmd_list)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the ``spillgauge`` command; return its exit code.

    Every failure is one line on stderr: a bad input exits 2, an interrupt 130
    (finished replications stay saved), anything unexpected 1 with the error's
    type (``SPILLGAUGE_DEBUG=1`` shows the traceback).
    """
    try:
        args = build_parser().parse_args(argv)
        return args.func(args)
    except SpillgaugeError as exc:
        return fail(str(exc), 2)
    except KeyboardInterrupt:
        return interrupted(None)
    except BrokenPipeError:
        return 0
    except MemoryError:
        return fail("out of memory; use fewer --workers, fewer users or a shorter horizon", 2)
    except OSError as exc:
        where = f": {exc.filename}" if exc.filename else ""
        return fail(f"{exc.strerror or exc.__class__.__name__}{where}", 2)
    except Exception as exc:  # noqa: BLE001 - a user sees one line, never a traceback
        if os.environ.get("SPILLGAUGE_DEBUG"):
            raise
        return fail(f"internal error ({exc.__class__.__name__}: {str(exc)[:200]}); please "
                     "report it, with the command (SPILLGAUGE_DEBUG=1 shows the traceback)", 1)


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
