"""Reports: text, Markdown, figures and a self-contained HTML page. They compute no statistics."""

from __future__ import annotations

from pathlib import Path

from spillgauge.report.text import market_text, study_markdown, study_text, truth_text

__all__ = ["write_report", "market_text", "study_text", "study_markdown", "truth_text"]

_STUDY_FILES = ("summary.json", "replications.csv")  # written by the study's results folder


def write_report(study, out: str | Path) -> list[str]:
    """Write the study's text and Markdown summaries, its figures and the HTML report.

    Writes ``summary.txt``, ``summary.md``, one PNG per figure the study can draw
    (see :func:`spillgauge.report.figures.save_figures`) and ``report.html``, each
    atomically (a temporary file in ``out``, then a rename).

    Parameters
    ----------
    study : StudyResult
    out : path
        Results folder (created when missing).

    Returns
    -------
    list of str
        Names of the study's files in ``out``: ``summary.json`` and
        ``replications.csv`` when the study's results folder holds them, then the
        files written here.
    """
    from spillgauge.files import write_atomic
    from spillgauge.report.figures import save_figures
    from spillgauge.report.html import render_html

    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    write_atomic(out / "summary.txt", study_text(study) + "\n")
    write_atomic(out / "summary.md", study_markdown(study) + "\n")
    pngs = save_figures(study, out)
    write_atomic(out / "report.html", render_html(study, {p.stem: p for p in pngs}))
    present = [name for name in _STUDY_FILES if (out / name).is_file()]
    return [*present, "summary.txt", "summary.md", *(p.name for p in pngs), "report.html"]
