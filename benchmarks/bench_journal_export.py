"""Journal write rate and dataset export cost, each side by side with a plain baseline.

    /work/venv/bin/python benchmarks/bench_journal_export.py [--quick]

1. Durable snapshots/s for a 32-meter bench (27 values per meter): ``Journal.record_snapshot``
   against a bare sqlite3 loop inserting the same rows with the same durability (WAL,
   synchronous=FULL, one commit per snapshot). Targets: >= 200/s, within 1.5x of bare.
2. Export of a 1,000,000-value session (CSV + Parquet + datapackage.json) against pandas
   writing the same frame straight to CSV and Parquet; time and peak RSS, each run in a
   fresh process (``ru_maxrss``). Target: within 1.5x of pandas.
3. Peak RSS of exporting sessions of growing length: streaming keeps it flat.

Fixture journals for 2 and 3 are written through ``Journal`` with ``synchronous=OFF`` (only to
build them fast; the format is the same). Medians of repeated runs where it is cheap.
"""

from __future__ import annotations

import argparse
import json
import resource
import shutil
import sqlite3
import statistics
import subprocess
import sys
import tempfile
import time
from array import array
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "tests"))
sys.path.insert(0, str(ROOT / "benchmarks"))

from common import Figure, Target, ratio, slowdown  # noqa: E402
from support.invented_bench import KEYS, make_bench, make_snapshot  # noqa: E402

from meas.journal.store import Journal  # noqa: E402

N_METERS = 32


def _snapshots(n: int, meters: list[str], seed: int = 0) -> list:
    rng = np.random.default_rng(seed)
    return [make_snapshot(i, meters, rng) for i in range(n)]


def journal_rate(folder: Path, n: int) -> float:
    profile = make_bench(folder / "profile", N_METERS)
    snaps = _snapshots(n, [m.id for m in profile.meters])
    j = Journal.create(
        folder / f"j-{time.monotonic_ns()}.sqlite",
        profile,
        operator="bench",
    )
    t = time.perf_counter()
    for s in snaps:
        j.record_snapshot(s, step_id="S1", role="capture")
    dt = time.perf_counter() - t
    j.close()
    return n / dt


def bare_rate(folder: Path, n: int) -> float:
    """The same rows (one per meter, values and qualities packed), same pragmas, no Journal."""
    profile = make_bench(folder / "profile", N_METERS)
    snaps = _snapshots(n, [m.id for m in profile.meters])
    conn = sqlite3.connect(folder / f"bare-{time.monotonic_ns()}.sqlite")
    conn.execute("PRAGMA journal_mode=WAL")
    conn.execute("PRAGMA synchronous=FULL")
    conn.execute(
        "CREATE TABLE snapshot(id INTEGER PRIMARY KEY, seq, step, role, time_utc, t_mono, cycle_s, switches, saved_utc)"
    )
    conn.execute(
        "CREATE TABLE reading(snapshot, pos, meter, keyset, vals BLOB, qual BLOB, state, exception_code, error,"
        " last_good_utc, error_count, latency_s, PRIMARY KEY(snapshot, pos)) WITHOUT ROWID"
    )
    t = time.perf_counter()
    for s in snaps:
        with conn:
            sid = conn.execute(
                "INSERT INTO snapshot(seq, step, role, time_utc, t_mono, cycle_s, switches, saved_utc)"
                " VALUES(?,?,?,?,?,?,?,?)",
                (
                    s.seq,
                    "S1",
                    "capture",
                    s.time_utc.isoformat(),
                    s.t_mono,
                    s.cycle_s,
                    json.dumps(dict(s.switches)),
                    s.time_utc.isoformat(),
                ),
            ).lastrowid
            conn.executemany(
                "INSERT INTO reading VALUES(?,?,?,?,?,?,?,?,?,?,?,?)",
                [
                    (
                        sid,
                        pos,
                        m,
                        1,
                        array("d", b.values.values()).tobytes(),
                        bytes(len(b.values)),
                        str(b.state),
                        b.exception_code,
                        b.error,
                        None,
                        b.error_count,
                        b.latency_s,
                    )
                    for pos, (m, b) in enumerate(s.meters.items())
                ],
            )
    dt = time.perf_counter() - t
    conn.close()
    return n / dt


def build_journal(folder: Path, n_values: int) -> Path:
    profile = make_bench(folder / "profile", N_METERS)
    meters = [m.id for m in profile.meters]
    per_snapshot = N_METERS * len(KEYS)
    n = -(-n_values // per_snapshot)
    path = folder / f"long-{n_values}.sqlite"
    j = Journal.create(
        path,
        profile,
        operator="bench",
        session_id=f"bench-{n_values}",
    )
    j._conn.execute("PRAGMA synchronous=OFF")  # fixture only: build fast, same format
    rng = np.random.default_rng(1)
    base = make_snapshot(0, meters, rng)
    from dataclasses import replace
    from datetime import timedelta

    for i in range(n):
        snap = replace(
            base, seq=i, time_utc=base.time_utc + timedelta(seconds=i), t_mono=1000.0 + i
        )
        j.record_snapshot(snap, step_id="S1" if i < n // 2 else "S2", role="capture")
    j.close()
    return path


def _child(phase: str, src: str, out: str) -> dict:
    proc = subprocess.run(
        [sys.executable, __file__, "--child", phase, src, out],
        capture_output=True,
        text=True,
        check=True,
    )
    return json.loads(proc.stdout.strip().splitlines()[-1])


def child_main(phase: str, src: str, out: str) -> None:
    t = time.perf_counter()
    if phase == "export":
        from meas.dataset.export import export_session

        export_session(Path(src), Path(out), overwrite=True)
        rows = None
    elif phase == "pandas":
        import pandas as pd

        df = pd.read_parquet(src)  # the same frame our export writes, loaded whole
        t = time.perf_counter()  # time the writing only, as our export's reading is included
        Path(out).mkdir(parents=True, exist_ok=True)
        df.to_csv(Path(out) / "measurements.csv", index=False)
        df.to_parquet(Path(out) / "measurements.parquet", compression="zstd", index=False)
        rows = len(df)
    dt = time.perf_counter() - t
    rss_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(json.dumps({"seconds": dt, "peak_rss_mb": rss_mb, "rows": rows}))


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true", help="fewer snapshots and repeats")
    ap.add_argument(
        "--part", type=int, choices=(1, 2, 3), action="append", help="run only these parts"
    )
    ap.add_argument("--child", nargs=3, metavar=("PHASE", "SRC", "OUT"))
    args = ap.parse_args()
    if args.child:
        child_main(*args.child)
        return
    n_snap = 300 if args.quick else 500
    reps = 3 if args.quick else 5
    parts = set(args.part or (1, 2, 3))
    tmp = Path(tempfile.mkdtemp(prefix="bw-bench-"))
    try:
        if 1 in parts:
            part1(tmp, n_snap, reps)
        if parts & {2, 3}:
            part23(tmp, reps, args.quick, parts)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


def journal_side_by_side(tmp: Path, n_snap: int, reps: int) -> dict:
    ours, bare = [], []
    for i in range(
        reps
    ):  # interleaved, who goes first alternating, so machine load hits both alike
        if i % 2:
            bare.append(bare_rate(tmp / f"b{i}", n_snap))
            ours.append(journal_rate(tmp / f"a{i}", n_snap))
        else:
            ours.append(journal_rate(tmp / f"a{i}", n_snap))
            bare.append(bare_rate(tmp / f"b{i}", n_snap))
    return {"journal": statistics.median(ours), "bare": statistics.median(bare)}


def export_side_by_side(tmp: Path, journal: Path, reps: int) -> dict:
    """Our export and pandas alone, alternating, each run in a fresh process."""
    e = [_child("export", str(journal), str(tmp / "ds0"))]
    pq_src = (
        tmp / "ds0" / "data" / "measurements.parquet"
    )  # pandas writes the very frame we exported
    p = []
    for i in range(reps):
        p.append(_child("pandas", str(pq_src), str(tmp / f"pd{i}")))
        if i + 1 < reps:
            e.append(_child("export", str(journal), str(tmp / f"ds{i + 1}")))
    med = statistics.median
    return {
        "rows": p[0]["rows"],
        "export_s": med(x["seconds"] for x in e),
        "pandas_s": med(x["seconds"] for x in p),
        "export_mb": med(x["peak_rss_mb"] for x in e),
        "pandas_mb": med(x["peak_rss_mb"] for x in p),
    }


def journal_figures(n_snap: int = 500, reps: int = 5) -> list[Figure]:
    """Durable snapshots/s of ``Journal`` against a bare sqlite3 loop, interleaved runs."""
    tmp = Path(tempfile.mkdtemp(prefix="bw-bench-"))
    try:
        j = journal_side_by_side(tmp, n_snap, reps)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return [
        Figure(
            "journal",
            f"durable snapshots/s, {N_METERS} meters x {len(KEYS)} values, vs bare sqlite3",
            j["journal"],
            "/s",
            j["bare"],
            slowdown(j["journal"], j["bare"], higher_is_better=True),
            (Target("ours", ">=", 200.0), Target("ratio", "<=", 1.5)),
            extra={"snapshots": n_snap, "reps": reps},
        )
    ]


def export_figures(reps: int = 3) -> list[Figure]:
    """Export of a 1,000,000-value session against pandas alone: time and peak memory."""
    tmp = Path(tempfile.mkdtemp(prefix="bw-bench-"))
    try:
        x = export_side_by_side(tmp, build_journal(tmp / "long", 1_000_000), reps)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    return [
        Figure(
            "export",
            f"{x['rows']:,} rows to CSV + Parquet vs pandas alone",
            x["export_s"],
            "s",
            x["pandas_s"],
            ratio(x["export_s"], x["pandas_s"]),
            (Target("ratio", "<=", 1.5),),
            extra={"reps": reps},
        ),
        Figure(
            "export",
            f"peak memory, {x['rows']:,} rows, vs pandas alone",
            x["export_mb"],
            "MB",
            x["pandas_mb"],
            ratio(x["export_mb"], x["pandas_mb"]),
            note="ru_maxrss of a fresh process",
        ),
    ]


def figures(quick: bool = False) -> list[Figure]:
    """Both parts, with this script's own repetition counts."""
    return journal_figures(300 if quick else 500, 3 if quick else 5) + export_figures(
        3 if quick else 5
    )


def part1(tmp: Path, n_snap: int, reps: int) -> None:
    r = journal_side_by_side(tmp, n_snap, reps)
    j_med, b_med = r["journal"], r["bare"]
    print(
        f"\n1. durable snapshots/s, {N_METERS} meters x {len(KEYS)} values, {n_snap} snapshots, median of {reps} interleaved runs"
    )
    print(f"   {'journal (record_snapshot)':<34}{j_med:>10.0f} /s")
    print(f"   {'bare sqlite3, same rows':<34}{b_med:>10.0f} /s")
    print(f"   bare / journal = {b_med / j_med:.2f}x   (targets: >= 200/s, <= 1.5x)")


def part23(tmp: Path, reps: int, quick: bool, parts: set[int]) -> None:
    journal = build_journal(tmp / "long", 1_000_000)
    if 2 in parts:
        r = export_side_by_side(tmp, journal, reps)
        es, ps, em, pm = r["export_s"], r["pandas_s"], r["export_mb"], r["pandas_mb"]
        print(
            f"\n2. export of {r['rows']:,} values (CSV + Parquet), median of {reps} fresh processes"
        )
        print(f"   {'':<34}{'seconds':>10}{'peak RSS MB':>14}")
        print(f"   {'export_session (all tables)':<34}{es:>10.2f}{em:>14.0f}")
        print(f"   {'pandas to_csv + to_parquet':<34}{ps:>10.2f}{pm:>14.0f}")
        print(
            f"   export / pandas: time {es / ps:.2f}x, memory {em / pm:.2f}x   (target: time <= 1.5x)"
        )

    if 3 in parts:
        sizes = [250_000, 1_000_000, 2_000_000] if not quick else [250_000, 1_000_000]
        print("\n3. streaming: peak RSS of export by session length")
        for n in sizes:
            src = journal if n == 1_000_000 else build_journal(tmp / f"long{n}", n)
            r = _child("export", str(src), str(tmp / f"s{n}"))
            print(f"   {n:>10,} values  {r['seconds']:>7.2f} s  {r['peak_rss_mb']:>7.0f} MB")


if __name__ == "__main__":
    main()
