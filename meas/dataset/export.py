"""Export a session journal as a tidy, self-describing dataset folder.

The folder holds every table twice, as CSV (for anyone) and Parquet (for speed), a
``datapackage.json`` (Frictionless Data Package v2 with Table Schemas, units and sha256
hashes), and the profile files copied from the journal. It is written into a temporary
folder beside the target, fsync'd and renamed, so a failed export never leaves half a
dataset. Measurements are streamed in batches: a four-hour, 32-meter session never sits in
memory whole.
"""

from __future__ import annotations

import contextlib
import json
import os
import re
import shutil
import sqlite3
import tempfile
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from .. import __version__
from ..errors import BenchwalkError
from ..journal.errors import JournalDamaged
from ..journal.read import JournalView
from ..journal.salvage import salvage_journal
from ..journal.sessions import resolve_session
from ..journal.store import Journal
from ..progress import Progress
from ..verdict import records_from_log, session_verdict
from .estimate_tables import session_estimate_of
from .files import fsync_dir, fsync_file, sha256_of, slug
from .grid_tables import NETWORK_FILE, write_network
from .measurements import BATCH_READINGS, measurement_batches, measurement_tables
from .outputs import check_dataset_target
from .schema import (
    DATA_DIR,
    FORMAT_MINOR,
    FORMAT_VERSION,
    MAIN_PROFILE,
    PROFILE_DIR,
    TABLES,
    arrow_schema,
    table_schema,
)
from .tables import small_tables, to_tables

DP_SCHEMA = "https://datapackage.org/profiles/2.0/datapackage.json"

_CSV_OPTS = pacsv.WriteOptions(include_header=True, quoting_style="needed")


class _TableWriter:
    """Parquet and CSV of one table, written batch by batch."""

    def __init__(self, folder: Path, name: str):
        self.name = name
        self.pq_path = folder / f"{name}.parquet"
        self.csv_path = folder / f"{name}.csv"
        self._pq = pq.ParquetWriter(self.pq_path, arrow_schema(name), compression="zstd")
        self._csv = pacsv.CSVWriter(
            self.csv_path, arrow_schema(name, for_csv=True), write_options=_CSV_OPTS
        )
        self.rows = 0

    def write(self, pq_t: pa.Table, csv_t: pa.Table) -> None:
        self._pq.write_table(pq_t.cast(arrow_schema(self.name)))
        self._csv.write_table(csv_t.cast(arrow_schema(self.name, for_csv=True)))
        self.rows += pq_t.num_rows

    def close(self) -> None:
        self._pq.close()
        self._csv.close()


def default_dataset_dir(journal_path: Path, session_id: str) -> Path:
    return Path(journal_path).parent / f"{session_id}-dataset"


def export_session(
    journal_path_or_session: str | Path,
    out_dir: Path | None = None,
    *,
    overwrite: bool = False,
    progress: Progress | None = None,
    replace_own: bool = False,
) -> Path:
    """Write the session's dataset folder atomically; returns its path.

    Only a benchwalk dataset is ever replaced (``overwrite``; or, with ``replace_own``, one
    of the same session); every other folder or file is refused before anything is written
    (``meas.dataset.outputs``). The journal's WAL is folded into it first when no session
    holds it, so the ``.sqlite`` file alone is a complete copy.
    """
    path = resolve_session(journal_path_or_session)
    with contextlib.ExitStack() as stack:
        try:
            journal = Journal.open(path)
            damage: list[str] = []
        except JournalDamaged as exc:  # export what is readable, with the damage listed
            tmp = Path(stack.enter_context(tempfile.TemporaryDirectory(prefix="benchwalk-")))
            saved = salvage_journal(path, tmp / path.name)
            damage = [f"{exc}"] + saved.damage
            journal = Journal.open(saved.path)
        return _export(journal, path, out_dir, overwrite, progress, replace_own, damage)


def _export(
    journal: Journal,
    path: Path,
    out_dir: Path | None,
    overwrite: bool,
    progress: Progress | None,
    replace_own: bool,
    damage: list[str],
) -> Path:
    where = path  # what a failure message names: the journal, then the folder being written
    try:
        target = (
            Path(out_dir) if out_dir is not None else default_dataset_dir(path, journal.session_id)
        )
        where = target
        check_dataset_target(
            target,
            path,
            overwrite=overwrite,
            session_id=journal.session_id,
            replace_own=replace_own,
        )
        if not damage:
            checkpoint_if_idle(journal, path)
        target.parent.mkdir(parents=True, exist_ok=True)
        remove_stale_exports(target)
        tmp = target.parent / f".{target.name}.partial-{os.getpid()}"
        if tmp.exists():
            shutil.rmtree(tmp)
        try:
            _write_dataset(journal, journal.path, tmp, progress, damage)
            _swap_in(tmp, target)
        except BaseException:
            shutil.rmtree(tmp, ignore_errors=True)
            raise
        remove_stale_exports(target)  # an old copy a killed swap left, now that NAME is back
        return target
    except OSError as exc:
        raise BenchwalkError(
            f"{exc.filename or where}: export failed ({exc.strerror or exc}); nothing was changed, the journal is intact"
        ) from exc
    except (pa.ArrowException, sqlite3.Error) as exc:
        raise BenchwalkError(
            f"{where}: export failed ({exc}); nothing was changed, the journal is intact"
        ) from exc
    finally:
        journal.close()


def checkpoint_if_idle(journal: Journal, path: Path) -> None:
    """Fold the WAL into the journal file when no process holds the session (a running one
    checkpoints on its own when it stops); a held session is left alone."""
    from ..journal.lock import SessionBusy, SessionLock

    try:
        lock = SessionLock(path).acquire()
    except (SessionBusy, BenchwalkError):
        return
    try:
        journal.checkpoint()
    finally:
        lock.release()


def _pid_alive(pid: int) -> bool:
    if pid <= 0:
        return True  # not a pid we could have written: leave it alone
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OverflowError, OSError):
        return True
    return True


def remove_stale_exports(target: Path) -> list[Path]:
    """Remove what killed exports of ``target`` left beside it; returns what was removed.

    Only folders named exactly like our own temporaries (``.NAME.partial-PID``, and
    ``.NAME.old-PID`` once ``NAME`` exists again) whose process is gone: a running export's
    folder, another target's, a file or a symlink is never touched.
    """
    target = Path(target)
    pattern = re.compile(rf"\.{re.escape(target.name)}\.(partial|old)-(\d{{1,10}})")
    removed: list[Path] = []
    try:
        entries = list(os.scandir(target.parent))
    except OSError:
        return removed
    for e in entries:
        m = pattern.fullmatch(e.name)
        if m is None or not e.is_dir(follow_symlinks=False):
            continue
        pid = int(m.group(2))
        if pid == os.getpid() or _pid_alive(pid):
            continue
        if m.group(1) == "old" and not target.exists():
            continue  # a swap killed between its renames: this may be the only copy
        shutil.rmtree(e.path, ignore_errors=True)
        removed.append(Path(e.path))
    return removed


def _swap_in(tmp: Path, target: Path) -> None:
    old = None
    if target.exists():
        old = target.parent / f".{target.name}.old-{os.getpid()}"
        os.rename(target, old)
    os.rename(tmp, target)
    fsync_dir(target.parent)
    if old is not None:
        if old.is_dir() and not old.is_symlink():
            shutil.rmtree(old, ignore_errors=True)
        else:  # never reached (a file target is refused first); never left behind either
            old.unlink(missing_ok=True)


ESTIMATE_STAGE = "estimating the session: every capture against the network model"


def _write_dataset(
    journal: Journal,
    journal_path: Path,
    folder: Path,
    progress: Progress | None,
    damage: list[str] | None = None,
) -> None:
    data = folder / DATA_DIR
    data.mkdir(parents=True)
    # one read transaction: a consistent view while the runner may still append
    with JournalView(journal_path) as view:
        total = view.reading_count()
        w = _TableWriter(data, "measurements")
        done = 0
        try:
            for cols in measurement_batches(view, journal.session_id, journal.profile_dict):
                w.write(*measurement_tables(cols))
                done = min(total, done + BATCH_READINGS)
                if progress:
                    progress(done, total)
        finally:
            w.close()
        counts = {"measurements": w.rows}
        for name, rows in small_tables(view, journal.profile_dict).items():
            _write_small(data, name, rows, counts)
    prof_dir = folder / PROFILE_DIR
    prof_dir.mkdir()
    profile_entries = []
    for i, (name, text) in enumerate(journal.profile_files()):
        rel = MAIN_PROFILE if i == 0 and name.endswith(".toml") else _safe_rel(name)
        dest = prof_dir / rel
        dest.parent.mkdir(parents=True, exist_ok=True)
        dest.write_bytes(
            text.encode("utf-8")
        )  # exactly the journalled text, no newline translation
        profile_entries.append(
            {
                "path": f"{PROFILE_DIR}/{rel}",
                "original_name": name,
                "hash": "sha256:" + sha256_of(dest),
            }
        )
    write_network(journal.profile_files(), folder)
    # the session estimate reads the tables and profile just written, as `benchwalk check` does
    if progress:
        progress(0, 0, stage=ESTIMATE_STAGE)
    est = session_estimate_of(folder)
    _write_small(data, "meter_gains", est.gains, counts)
    _write_small(data, "coverage", est.coverage, counts)
    for p in sorted(folder.rglob("*")):
        if p.is_file():
            fsync_file(p)
    pkg = _datapackage(journal, folder, counts, profile_entries)
    for r in pkg["resources"]:
        if r["name"] in ("meter_gains", "coverage"):
            r["description"] = est.description(r["name"])
    pkg["benchwalk"]["estimate"] = est.summary
    if damage:  # only a salvaged journal's dataset has the key
        pkg["benchwalk"]["journal_damage"] = damage
    (folder / "datapackage.json").write_text(
        json.dumps(pkg, indent=2, ensure_ascii=False) + "\n", encoding="utf-8"
    )
    fsync_file(folder / "datapackage.json")
    for d in (data, prof_dir, folder):
        fsync_dir(d)


def _write_small(data: Path, name: str, rows: list[dict[str, Any]], counts: dict[str, int]) -> None:
    tw = _TableWriter(data, name)
    try:
        tw.write(*to_tables(name, rows))
    finally:
        tw.close()
    counts[name] = tw.rows


def _safe_rel(name: str) -> str:
    parts = [p for p in Path(name).parts if p not in ("..", "/", "")]
    return "/".join(parts) or "companion.toml"


def _verdict(journal: Journal) -> dict[str, Any]:
    """The session verdict (``meas.verdict``), the same as the console and summary showed."""
    ids = [s["id"] for s in journal.profile_dict.get("steps", [])]
    by_step = journal.unverified_by_step()
    unverified = [line for sid in ids for line in by_step.get(sid, [])]
    return session_verdict(records_from_log(ids, journal.step_history()), unverified).as_dict()


def _datapackage(
    journal: Journal, folder: Path, counts: dict[str, int], profile_entries: list[dict]
) -> dict[str, Any]:
    resources = []
    for name in TABLES:
        csv_p = folder / DATA_DIR / f"{name}.csv"
        pq_p = folder / DATA_DIR / f"{name}.parquet"
        resources.append(
            {
                "name": name,
                "type": "table",
                "path": f"{DATA_DIR}/{name}.csv",
                "format": "csv",
                "mediatype": "text/csv",
                "encoding": "utf-8",
                "title": TABLES[name]["title"],
                "bytes": csv_p.stat().st_size,
                "hash": "sha256:" + sha256_of(csv_p),
                "schema": table_schema(name),
                # the same table as Parquet (real timestamps, faster to read); same columns and rows
                "benchwalk:parquet": {
                    "path": f"{DATA_DIR}/{name}.parquet",
                    "mediatype": "application/vnd.apache.parquet",
                    "bytes": pq_p.stat().st_size,
                    "hash": "sha256:" + sha256_of(pq_p),
                },
                "benchwalk:rows": counts[name],
            }
        )
    return {
        "$schema": DP_SCHEMA,
        "name": f"benchwalk-{slug(journal.session_id)}",
        "title": f"{journal.bench}: session {journal.session_id}",
        "description": (journal.profile_dict.get("bench", {}).get("description") or journal.bench),
        "created": datetime.now(UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        "contributors": [{"title": journal.operator, "roles": ["operator"]}]
        if journal.operator
        else [],
        "resources": resources,
        "benchwalk": {
            "format": FORMAT_VERSION,
            "format_minor": FORMAT_MINOR,
            "software": f"benchwalk {__version__}",
            "session": journal.session_id,
            "bench": journal.bench,
            "operator": journal.operator,
            "session_started_utc": journal.created_utc,
            "profile_sha256": journal.profile_sha256,
            "profile_files": profile_entries,
            "network": NETWORK_FILE if (folder / NETWORK_FILE).is_file() else None,
            "meta": journal.meta,
            "simulated": bool(journal.meta.get("simulated")),
            "verdict": _verdict(journal),
            "sign_convention": "positive P and Q = power flowing from the meter's bus into its branch",
            "values": "primary, bench-side SI units; value_network and value_pu derived from the profile",
        },
    }
