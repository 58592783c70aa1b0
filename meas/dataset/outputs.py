"""What an output may replace: only what benchwalk itself wrote, of the expected kind.

``export --overwrite`` replaces a folder only when it is a benchwalk dataset (its
``datapackage.json`` carries the ``benchwalk`` property); a report replaces only an earlier
benchwalk report. Every output path is checked against the inputs (the journal, its WAL and
lock, the dataset folder) and the whole output folder is checked before a session starts,
so a mistake is found before an hour of measuring, not after it.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

from ..errors import BenchwalkError

REPORT_MARKS = {  # how the first lines of each report format begin (meas.report writes them)
    ".html": "<title>Commissioning report: ",
    ".md": "# Commissioning report: ",
}


def dataset_session(folder: Path) -> str | None:
    """The session id of a benchwalk dataset folder, or None when it is not one."""
    try:
        with open(Path(folder) / "datapackage.json", encoding="utf-8") as f:
            pkg = json.loads(f.read(8 << 20))
    except (OSError, UnicodeDecodeError, ValueError, RecursionError):
        return None
    meta = pkg.get("benchwalk") if isinstance(pkg, dict) else None
    if not isinstance(meta, dict) or not isinstance(meta.get("session"), str):
        return None
    return str(meta["session"])


def is_report(path: Path) -> bool:
    """True when ``path`` is a report benchwalk wrote (HTML or Markdown, by its first lines)."""
    mark = REPORT_MARKS.get(Path(path).suffix.lower())
    if mark is None or Path(path).is_symlink() or not Path(path).is_file():
        return False
    try:
        with open(path, encoding="utf-8", errors="replace") as f:
            head = f.read(4096)
    except OSError:
        return False
    return mark in head


def _writable_ancestor(path: Path) -> Path | None:
    """The nearest folder that exists above ``path`` when it is not writable, else None."""
    p = Path(path).absolute().parent
    while not p.exists() and p != p.parent:
        p = p.parent
    if p.is_dir() and not os.access(p, os.W_OK | os.X_OK):
        return p
    return None


def _same_or_inside(a: Path, b: Path) -> bool:
    try:
        return a.resolve() == b.resolve() or b.resolve().is_relative_to(a.resolve())
    except (OSError, RuntimeError):
        return False


def check_dataset_target(
    target: Path,
    journal: Path,
    *,
    overwrite: bool,
    session_id: str | None = None,
    replace_own: bool = False,
) -> None:
    """Refuse, before anything is written, a dataset folder that would replace or damage
    something benchwalk did not write there. ``replace_own``: a dataset of the same session
    (``session_id``) may be written again without ``overwrite`` (a resumed, finished walk)."""
    target = Path(target)
    for inp in (journal, *(journal.with_name(journal.name + s) for s in ("-wal", "-shm", ".lock"))):
        if _same_or_inside(target, inp):
            raise BenchwalkError(
                f"{target}: the dataset folder would replace the session journal {journal} "
                "(or the folder holding it); choose another --out"
            )
    if target.is_symlink():
        raise BenchwalkError(
            f"{target}: is a symbolic link; give a real folder as --out (nothing was changed)"
        )
    if target.exists():
        if not target.is_dir():
            raise BenchwalkError(
                f"{target}: is a file, not a dataset folder; nothing was changed, choose another --out"
            )
        try:
            empty = not any(os.scandir(target))
        except OSError as exc:
            raise BenchwalkError(f"{target}: cannot read the folder ({exc.strerror})") from None
        if not empty:
            owner = dataset_session(target)
            if owner is None:
                raise BenchwalkError(
                    f"{target}: the folder is not a benchwalk dataset (no benchwalk datapackage.json); "
                    "it is never replaced, even with --overwrite: choose another --out"
                )
            if not overwrite and not (replace_own and owner == session_id):
                raise BenchwalkError(
                    f"{target}: a dataset (session {owner}) already exists there; pass --overwrite "
                    "to replace it or choose another --out"
                )
    if target.parent.exists() and not target.parent.is_dir():
        raise BenchwalkError(f"{target.parent}: is a file, not a folder; choose another --out")
    locked = _writable_ancestor(target)
    if locked is not None:
        raise BenchwalkError(f"{locked}: the folder is not writable; choose another --out")


def check_report_target(html: Path, dataset: Path | None = None) -> tuple[Path, Path]:
    """The (HTML, Markdown) pair a report may write: neither may replace anything but an
    earlier benchwalk report of the same format, nor land inside the dataset folder."""
    html = Path(html)
    if html.suffix.lower() == ".md":
        raise BenchwalkError(
            f"{html}: give the HTML file name (.html); the Markdown is written beside it"
        )
    md = html.with_suffix(".md")
    for p in (html, md):
        if dataset is not None and _same_or_inside(Path(dataset), p):
            raise BenchwalkError(
                f"{p}: the report would be written inside the dataset folder {dataset} and "
                "change it; give an --out outside it"
            )
        if p.is_symlink() or (p.exists() and not is_report(p)):
            raise BenchwalkError(
                f"{p}: exists and is not a benchwalk report; it is never replaced: "
                "choose another --out"
            )
        locked = _writable_ancestor(p)
        if locked is not None:
            raise BenchwalkError(f"{locked}: the folder is not writable; choose another --out")
    return html, md


def check_output_folder(
    out: Path, journal: Path | None = None, session_id: str | None = None
) -> None:
    """Before a session starts: ``out`` can take ``dataset/`` and ``report.html`` (+ ``.md``)
    at its end, replacing nothing but this session's own earlier dataset (``session_id``:
    a resumed session whose export was interrupted)."""
    out = Path(out)
    if out.exists() and not out.is_dir():
        raise BenchwalkError(f"{out}: is a file, not a folder; choose another --out")
    ds = out / "dataset"
    if ds.exists() and (session_id is None or dataset_session(ds) != session_id):
        raise BenchwalkError(
            f"{out}: already holds a dataset; choose a new --out folder before the session starts"
        )
    if journal is not None:
        check_dataset_target(ds, journal, overwrite=False, session_id=session_id, replace_own=True)
    else:
        locked = _writable_ancestor(out / "dataset")
        if locked is not None:
            raise BenchwalkError(f"{locked}: the folder is not writable; choose another --out")
    check_report_target(out / "report.html")
