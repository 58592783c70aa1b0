"""The commissioning report of a dataset: one self-contained HTML file and a Markdown twin.

Built from the dataset folder alone: ``rows`` gathers the figures, ``html`` (with the SVG of
``charts``) and ``markdown`` render them, and ``write_report`` puts both files beside each other.
The core draws nothing on a terminal: a caller that wants a progress bar passes ``progress``.
"""

from __future__ import annotations

import os
from pathlib import Path

from ..errors import BenchwalkError
from ..progress import Progress
from .html import render_html
from .markdown import render_markdown
from .rows import ReportData, gather

__all__ = [
    "ReportData",
    "default_report_path",
    "gather",
    "render_html",
    "render_markdown",
    "write_report",
]


def default_report_path(dataset_dir: Path) -> Path:
    d = Path(dataset_dir).resolve()
    return d.parent / f"{d.name}-report.html"


def write_report(
    dataset_dir: Path,
    out: Path | None = None,
    progress: Progress | None = None,
) -> tuple[Path, Path]:
    """Write ``out`` (HTML) and the Markdown beside it; returns both paths.

    ``progress(done, total)`` is called as the three stages (gather, render, write) finish.
    """
    html_path = Path(out) if out is not None else default_report_path(dataset_dir)
    md_path = html_path.with_suffix(".md")
    folder = Path(dataset_dir).resolve()
    if html_path.resolve().is_relative_to(folder):  # the .md beside it would land there too
        raise BenchwalkError(
            f"{html_path}: the report would be written inside the dataset folder {dataset_dir} and "
            "change it; give an --out outside it"
        )
    update = progress or (lambda done, total, stage="": None)
    update(0, 3)
    rd = gather(dataset_dir)
    update(1, 3)
    texts = render_html(rd), render_markdown(rd)
    update(2, 3)
    for path, text in zip((html_path, md_path), texts, strict=True):
        tmp = path.with_name(f".{path.name}.partial-{os.getpid()}")
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
            tmp.write_text(text, encoding="utf-8")
            os.replace(tmp, path)
        except OSError as exc:
            tmp.unlink(missing_ok=True)
            raise BenchwalkError(
                f"{path}: cannot write the report ({exc.strerror or exc}); choose another --out"
            ) from exc
    update(3, 3)
    return html_path, md_path
