"""Time of all checks on one snapshot: the demo bench and a synthetic 32-meter bench.

The synthetic bench (``radial_bench`` in tests/support/check_inputs.py, which the golden check
results also pin) is invented data built in code: a source, a chain of
line sections metered at both ends and load banks metered at each bus, on the demo's maps.

Run:  /work/venv/bin/python benchmarks/bench_checks.py [--repeat 300]
      /work/venv/bin/python benchmarks/bench_checks.py --profile   (cProfile of today's engine, 32 meters)

Snapshots come from the simulated bench (meas.sim, noise on) with a history of 16 earlier
snapshots, as the runner feeds them. Cases are measured interleaved, round after round with
the starting case rotated, so a busy machine slows all of them alike; the table gives the
median and the 10th percentile of the wall time per call and the minimum (closest to an idle
machine). The ratio column compares each bench with the engine rebuilt on every call
(``run_checks``), which shows what the per-profile preparation of ``CheckEngine`` saves.
Target: < 2 ms median for 32 meters with a prebuilt ``CheckEngine``. Results are pinned bit for
bit by tests/checks/test_checks_golden.py, so any speed-up is checked against the same answers.
"""

from __future__ import annotations

import argparse
import dataclasses
import math
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
from common import Figure, Target, interleaved, machine_line, median, percentile  # noqa: E402
from support.check_inputs import radial_bench  # noqa: E402

from meas.checks import CheckEngine, run_checks  # noqa: E402
from meas.profile import load_profile  # noqa: E402
from meas.sim.meters import snapshot_from_sim  # noqa: E402
from meas.sim.readings import ideal_readings  # noqa: E402

DEMO = Path(__file__).resolve().parent.parent / "profiles_demo" / "feeder_bench.toml"


def _series(profile, switches, n: int = 40, seed: int = 1):
    ideal = ideal_readings(profile, switches)
    rng = np.random.default_rng(seed)
    out, prev = [], None
    for k in range(n):
        prev = snapshot_from_sim(
            profile, switches, [], rng, k, ideal=ideal, t_mono=0.2 * k, previous=prev
        )
        out.append(prev)
    return out


def _same(a: list, b: list) -> bool:
    """Every field equal, floats bit for bit (NaN = NaN)."""

    def key(r):
        return tuple(
            ("nan" if isinstance(v, float) and math.isnan(v) else v) for v in dataclasses.astuple(r)
        )

    return len(a) == len(b) and all(key(x) == key(y) for x, y in zip(a, b, strict=True))


def measure(repeat: int = 300) -> tuple[dict[str, list[float]], dict[str, int]]:
    """Wall times (s) per case and result counts, all cases interleaved."""
    demo = load_profile(DEMO)
    big = radial_bench(demo, 32)
    benches = {
        f"demo bench ({len(demo.meters)} meters)": (
            demo,
            _series(demo, {s.id: s.normal for s in demo.switches}),
        ),
        f"synthetic bench ({len(big.meters)} meters)": (big, _series(big, {})),
    }
    cases, counts = {}, {}
    for label, (prof, snaps) in benches.items():
        engine = CheckEngine(prof)
        state = {"k": 0}

        def call(engine=engine, snaps=snaps, state=state):
            """The runner's situation: a new snapshot (its frame not built yet) after 16 known ones."""
            j = 16 + state["k"] % (len(snaps) - 16)
            state["k"] += 1
            engine.forget(snaps[j])
            return engine.run(snaps[j], snaps[j - 16 : j])

        cases[f"{label}, CheckEngine.run"] = call
        counts[f"{label}, CheckEngine.run"] = len(call())

        def rebuilt(prof=prof, snaps=snaps):
            return run_checks(prof, snaps[-1], snaps[-17:-1])

        cases[f"{label}, run_checks (engine built per call)"] = rebuilt
        if not _same(CheckEngine(prof).run(snaps[-1], snaps[-17:-1]), rebuilt()):
            raise SystemExit(
                f"{label}: a prebuilt engine and run_checks disagree; run tests/checks/test_checks_golden.py"
            )
        counts[f"{label}, run_checks (engine built per call)"] = len(rebuilt())
    return interleaved(cases, repeat), counts


def figures(repeat: int = 300) -> list[Figure]:
    """Rows for the performance table: each bench with a prebuilt engine; the 32-meter target."""
    times, _ = measure(repeat)
    out = []
    for name in times:
        if not name.endswith("CheckEngine.run"):
            continue
        ours = median(times[name]) * 1e3
        ref = (
            median(times[name.replace("CheckEngine.run", "run_checks (engine built per call)")])
            * 1e3
        )
        targets = (Target("ours", "<", 2.0),) if "32 meters" in name else ()
        out.append(
            Figure(
                "checks",
                name + " (reference: engine rebuilt per call)",
                ours,
                "ms",
                ref,
                ours / ref,
                targets,
            )
        )
    return out


def profile(calls: int = 300, top: int = 30) -> None:
    """cProfile of today's engine on the 32-meter bench, in the runner's situation (new snapshot)."""
    import cProfile  # noqa: PLC0415
    import pstats  # noqa: PLC0415

    big = radial_bench(load_profile(DEMO), 32)
    snaps = _series(big, {})
    engine = CheckEngine(big)

    def loop() -> None:
        for k in range(calls):
            j = 16 + k % (len(snaps) - 16)
            engine.forget(snaps[j])
            engine.run(snaps[j], snaps[j - 16 : j])

    loop()  # warm
    prof = cProfile.Profile()
    prof.runcall(loop)
    pstats.Stats(prof).sort_stats("tottime").print_stats(top)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=300)
    ap.add_argument(
        "--profile", action="store_true", help="print a cProfile of today's engine instead"
    )
    args = ap.parse_args()
    if args.profile:
        profile()
        return 0
    times, counts = measure(args.repeat)
    print(f"{'case':80s} {'results':>7s} {'median ms':>10s} {'p10 ms':>8s} {'min ms':>8s}")
    for name, ts in times.items():
        print(
            f"{name:80s} {counts[name]:7d} {median(ts) * 1e3:10.3f} {percentile(ts, 0.1) * 1e3:8.3f} "
            f"{min(ts) * 1e3:8.3f}"
        )
    print(f"{machine_line()}; repeat {args.repeat}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
