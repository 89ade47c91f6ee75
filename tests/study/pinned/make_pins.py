"""Write the pinned short runs of every bundled scenario (run by hand when numbers must change).

    python tests/study/pinned/make_pins.py

Each file holds, per replication and design, the estimate, SE, interval and
that replication's GTE, as exact float reprs. ``test_pinned_numbers.py`` re-runs
the same short studies and requires the same bits; a change that must move the
numbers regenerates these files and says so in its commit message.
"""

from __future__ import annotations

import json
from pathlib import Path

HERE = Path(__file__).parent
REPS = 3
SEED = 11


def pinned_run(name: str) -> dict:
    """Return the short run of one bundled scenario as plain data."""
    from spillgauge import load_scenario, run_study
    from spillgauge.bundled import find_scenario

    study = run_study(load_scenario(find_scenario(name)), reps=REPS, seed=SEED, workers=1)
    rows = []
    for rep in study.replications:
        truth = {k: repr(float(v)) for k, v in rep.truth.to_dict().items()}
        for label, run in rep.runs.items():
            rows.append({"replication": rep.replication, "label": label, "truth": truth,
                         **{k: repr(float(v)) for k, v in run.to_record().items()}})
    metrics = {label: {k: repr(float(v)) for k, v in m.to_dict().items()}
               for label, m in study.metrics.items()}
    return {"scenario": name, "reps": REPS, "seed": SEED, "rows": rows, "metrics": metrics,
            "recommendation": study.recommendation.label}


def main() -> None:
    from spillgauge.bundled import bundled_scenarios

    for name in (path.stem for path in bundled_scenarios()):
        (HERE / f"{name}.json").write_text(json.dumps(pinned_run(name), indent=1) + "\n")
        print("wrote", name)


if __name__ == "__main__":
    main()
