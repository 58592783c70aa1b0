"""The performance suite: every benchmark in one run, one table of figures with targets.

    .venv/bin/python benchmarks/run_all.py [--quick] [--markdown FILE] [--only AREA,AREA]

Each row is a median of ours against a reference measured side by side in the same run (a bare
pymodbus loop, a bare sqlite3 loop, pandas alone, the naive one-read-per-quantity plan,
pandapower), their ratio (how many times ours costs the reference: > 1 = ours slower or
bigger; rates are inverted so the meaning stays the same), the target and pass/miss.
``--quick`` (about 1-2 minutes) shrinks repetitions; the full run takes about 5-10 minutes.
A benchmark that cannot run here (missing module or package, a failure) becomes a row that says
why; the exit code is 1 then, and 0 otherwise: a missed target is a finding, not a crash.
Timings are never asserted in unit tests; ``tests/proofs/test_benchmarks_smoke.py`` checks the table.
"""

from __future__ import annotations

import os

# BLAS threads oversubscribe a shared machine and slow the load flow many times (bench_solver).
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import argparse  # noqa: E402
import importlib  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
from collections.abc import Callable, Sequence  # noqa: E402
from dataclasses import dataclass  # noqa: E402
from datetime import UTC, datetime  # noqa: E402
from pathlib import Path  # noqa: E402

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))
sys.path.insert(1, str(HERE.parent))

from common import (  # noqa: E402
    Figure,
    Target,
    machine_line,
    markdown_table,
    median,
    missing,
    percentile,
    rich_table,
)

DEMO = HERE.parent / "profiles_demo" / "feeder_bench.toml"


@dataclass(frozen=True)
class Config:
    """Repetitions of every benchmark; one instance per mode."""

    name: str
    poller_sizes: tuple[int, ...] = (1, 8, 32, 128)
    poller_cycles: int = 60
    solver_repeat: int = 31
    sim_seconds: float = 10.0
    sim_update_samples: int = 200
    checks_repeat: int = 500
    journal_snapshots: int = 500
    journal_reps: int = 7
    export_reps: int = 5
    console_seconds: float = 15.0


FULL = Config("full")
QUICK = Config(
    "quick",
    poller_cycles=10,
    solver_repeat=6,
    sim_seconds=3.0,
    sim_update_samples=50,
    checks_repeat=60,
    journal_snapshots=200,
    journal_reps=3,
    export_reps=1,
    console_seconds=4.0,
)
TINY = Config(
    "tiny",
    poller_sizes=(1,),
    poller_cycles=3,
    solver_repeat=2,
    sim_seconds=1.0,
    sim_update_samples=5,
    checks_repeat=3,
    journal_snapshots=20,
    journal_reps=1,
    export_reps=1,
    console_seconds=1.0,
)


def _module(name: str):
    """A benchmark module, or None when it is not there (yet)."""
    try:
        return importlib.import_module(name)
    except ModuleNotFoundError as e:
        if e.name == name:
            return None
        raise


# ---------------------------------------------------------------- sections


def plan_section(cfg: Config) -> list[Figure]:
    return _module("bench_poller").plan_figures()


def poller_section(cfg: Config) -> list[Figure]:
    return _module("bench_poller").figures(cfg.poller_sizes, cfg.poller_cycles)


def solver_section(cfg: Config) -> list[Figure]:
    return _module("bench_solver").figures(cfg.solver_repeat)


def simulator_section(cfg: Config) -> list[Figure]:
    return _module("bench_sim_rate").figures(cfg.sim_seconds, cfg.sim_update_samples)


CHECKS_TARGET = Target("ours", "<", 2.0)  # ms per snapshot for 32 meters with a prebuilt engine


def checks_section(cfg: Config) -> list[Figure]:
    """Checks per snapshot: ``bench_checks.figures`` if it has it, else its benches timed here."""
    mod = _module("bench_checks")
    if mod is None:
        return [
            missing(
                "checks",
                "checks per snapshot, 32 meters",
                "benchmarks/bench_checks.py not found",
                "ms",
                (CHECKS_TARGET,),
            )
        ]
    if hasattr(mod, "figures"):
        return mod.figures(repeat=cfg.checks_repeat)
    from meas.checks import CheckEngine
    from meas.profile import load_profile

    demo = load_profile(DEMO)
    big = mod.radial_bench(demo, 32)
    cases = {
        "demo": (CheckEngine(demo), mod._series(demo, {s.id: s.normal for s in demo.switches})),
        "big": (CheckEngine(big), mod._series(big, {})),
    }
    times: dict[str, list[float]] = {k: [] for k in cases}
    names = list(cases)
    for k in range(cfg.checks_repeat + 1):
        for name in names[k % 2 :] + names[: k % 2]:  # alternate who goes first
            engine, snaps = cases[name]
            j = 16 + k % (len(snaps) - 16)
            engine.forget(snaps[j])  # the runner's case: a new snapshot after 16 known ones
            t = time.perf_counter()
            engine.run(snaps[j], snaps[j - 16 : j])
            if k:  # the first round warms up
                times[name].append(time.perf_counter() - t)
    return [
        Figure(
            "checks",
            f"all checks per snapshot, demo bench ({len(demo.meters)} meters)",
            median(times["demo"]) * 1e3,
            "ms",
            targets=(CHECKS_TARGET,),
            note=f"p90 {percentile(times['demo'], 0.9) * 1e3:.2f} ms",
        ),
        Figure(
            "checks",
            f"all checks per snapshot, synthetic bench ({len(big.meters)} meters)",
            median(times["big"]) * 1e3,
            "ms",
            targets=(CHECKS_TARGET,),
            note=f"p90 {percentile(times['big'], 0.9) * 1e3:.2f} ms",
        ),
    ]


def journal_section(cfg: Config) -> list[Figure]:
    return _module("bench_journal_export").journal_figures(cfg.journal_snapshots, cfg.journal_reps)


def export_section(cfg: Config) -> list[Figure]:
    return _module("bench_journal_export").export_figures(cfg.export_reps)


CPU_TARGET = Target("ours", "<", 30.0, "< 30 % of a core")
DELAY_TARGET = Target("ours", "<", 200.0)


def console_section(cfg: Config) -> list[Figure]:
    """Console CPU and snapshot-to-display delay, from ``bench_console``."""
    mod = _module("bench_console")
    if mod is None:
        why = "benchmarks/bench_console.py not found"
        return [
            missing("console", "CPU at 5 updates/s, 32 meters", why, "%", (CPU_TARGET,)),
            missing("console", "snapshot-to-display delay", why, "ms", (DELAY_TARGET,)),
        ]
    import asyncio

    r = asyncio.run(mod.measure(cfg.console_seconds, 5.0, (120, 40), 32))
    shown = f"{r['frames_per_s']:.1f} frames/s shown"
    return [
        Figure(
            "console",
            f"CPU at 5 updates/s, {r['meters']} meters, {r['size']}",
            r["cpu_pct_one_core"],
            "%",
            targets=(CPU_TARGET,),
            note=shown,
        ),
        Figure(
            "console",
            "snapshot-to-display delay, median",
            r["delay_median_ms"],
            "ms",
            targets=(DELAY_TARGET,),
        ),
        Figure(
            "console",
            "snapshot-to-display delay, p95",
            r["delay_p95_ms"],
            "ms",
            targets=(DELAY_TARGET,),
            note=f"max {r['delay_max_ms']:.0f} ms",
        ),
    ] + (
        [
            Figure(
                "console",
                "key press to action done, median",
                r["key_median_ms"],
                "ms",
                note=f"max {r['key_max_ms']:.0f} ms",
            )
        ]
        if "key_median_ms" in r
        else []
    )


def cli_section(cfg: Config) -> list[Figure]:
    return _module("bench_cli_start").figures(max(3, cfg.checks_repeat // 20))


SECTIONS: dict[str, tuple[str, Callable[[Config], list[Figure]]]] = {
    "plan": ("poll plan", plan_section),
    "poller": ("poller", poller_section),
    "solver": ("solver", solver_section),
    "simulator": ("simulator", simulator_section),
    "checks": ("checks", checks_section),
    "journal": ("journal", journal_section),
    "export": ("export", export_section),
    "console": ("console", console_section),
    "cli": ("command line", cli_section),
}


def collect(
    cfg: Config, only: Sequence[str] | None = None, progress: Callable[[str], None] | None = None
) -> list[Figure]:
    """Run the chosen sections in order; a section that fails becomes one row saying why."""
    figures: list[Figure] = []
    for key in only or SECTIONS:
        area, fn = SECTIONS[key]
        t = time.monotonic()
        if progress:
            progress(f"{key} ...")
        try:
            figs = fn(cfg)
        except (
            Exception,
            SystemExit,
        ) as e:  # a benchmark's failure is a row of the table, not the suite's end
            figs = [
                missing(
                    area,
                    f"{key} benchmark",
                    f"failed: {type(e).__name__}: {str(e).splitlines()[0][:120]}"
                    if str(e)
                    else f"failed: {type(e).__name__}",
                )
            ]
        figures += figs
        if progress:
            progress(f"{key} done in {time.monotonic() - t:.1f} s")
    return figures


def header(cfg: Config, seconds: float) -> str:
    cmd = "benchmarks/run_all.py" + ("" if cfg.name == "full" else f" --{cfg.name}")
    return (
        f"benchwalk performance, {cfg.name} run of `{cmd}` on {datetime.now(UTC):%Y-%m-%d %H:%M} UTC, "
        f"{seconds:.0f} s; {machine_line()}; Python {sys.version.split()[0]}"
    )


FOOTNOTE = (
    "ours and reference are medians measured side by side in the same run; ratio = how many times "
    "ours costs the reference (> 1 = ours slower or bigger; inverted for rates)."
)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="fewer repetitions: about 2 minutes")
    ap.add_argument("--markdown", metavar="FILE", help="also write the table as Markdown to FILE")
    ap.add_argument(
        "--only", metavar="AREAS", help=f"comma-separated subset of: {','.join(SECTIONS)}"
    )
    args = ap.parse_args(argv)
    only = None
    if args.only:
        only = [a.strip() for a in args.only.split(",") if a.strip()]
        unknown = [a for a in only if a not in SECTIONS]
        if unknown:
            print(
                f"run_all: unknown area {', '.join(unknown)}; choose from {', '.join(SECTIONS)}",
                file=sys.stderr,
            )
            return 2
    cfg = QUICK if args.quick else FULL
    t0 = time.monotonic()
    figures = collect(
        cfg,
        only,
        progress=lambda s: print(f"[{time.monotonic() - t0:6.1f} s] {s}", file=sys.stderr),
    )
    head = header(cfg, time.monotonic() - t0)
    from rich.console import Console

    console = Console(width=max(160, Console().width))
    console.print(rich_table(figures, title=head))
    console.print(FOOTNOTE, style="dim")
    if args.markdown:
        text = f"{head}\n\n{markdown_table(figures)}\n{FOOTNOTE}\n"
        try:
            Path(args.markdown).write_text(text, encoding="utf-8")
        except OSError as e:
            print(
                f"run_all: cannot write {args.markdown}: {e.strerror}; the table above is complete",
                file=sys.stderr,
            )
            return 2
    return 1 if any(f.ours is None for f in figures) else 0


if __name__ == "__main__":
    sys.exit(main())
