"""Reports: text, Markdown, figures and a self-contained HTML page. They compute no statistics."""

from __future__ import annotations

from pathlib import Path

from spillgauge.report.text import market_text, study_markdown, study_text, truth_text

__all__ = ["write_report", "market_text", "study_text", "study_markdown", "truth_text"]


def write_report(study, out: str | Path) -> list[str]:
    """Write the study's text and Markdown summaries (and the HTML report when available).

    Returns the names of the files written.
    """
    from spillgauge.evaluation.store import write_atomic

    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    write_atomic(out / "summary.txt", study_text(study) + "\n")
    write_atomic(out / "summary.md", study_markdown(study) + "\n")
    return ["summary.json", "replications.csv", "summary.txt", "summary.md"]
