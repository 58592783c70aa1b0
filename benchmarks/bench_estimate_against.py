"""The estimator against an earlier checkout of benchwalk, in one process, captures interleaved.

Run:  python benchmarks/bench_estimate_against.py OLDER_CHECKOUT [--captures N]

(for example ``git worktree add /tmp/prev <commit>`` first). A shared machine's speed drifts
over minutes, so two benchmark runs one after the other can differ by half; here the earlier
code's ``meas`` package is loaded beside this one under another name (its imports are
relative) and each capture is estimated by both, one after the other, so both medians see the
same machine. Cases as in bench_estimate.py, on the demo bench widened to 32 meters:
what the check family runs per capture (for the earlier code: its check family's estimator,
which reported every coverage kind), the linearized estimate with every coverage kind, the
exact estimate, and a joint 15-step session of the 8-meter bench. Prints the CPU medians and
their ratio (this / earlier).
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")  # before numpy: see bench_estimate.py

import argparse  # noqa: E402
import importlib  # noqa: E402
import pathlib  # noqa: E402
import re  # noqa: E402
import shutil  # noqa: E402
import statistics  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
from types import ModuleType  # noqa: E402
from typing import Any  # noqa: E402

import numpy as np  # noqa: E402

ROOT = pathlib.Path(__file__).resolve().parent.parent
sys.path[:0] = [str(ROOT), str(ROOT / "tests")]
# the cases' switch state and widened bench are bench_estimate's (imports this tree's meas)
from bench_estimate import STATE, widened  # noqa: E402


def _earlier(checkout: pathlib.Path, into: pathlib.Path) -> tuple[ModuleType, ModuleType]:
    """The earlier checkout's estimator package and bench helpers, as ``meas_prev``."""
    shutil.copytree(checkout / "meas", into / "meas_prev")
    text = (checkout / "tests" / "support" / "estimate_bench.py").read_text(encoding="utf-8")
    text = re.sub(r"\bfrom meas\.", "from meas_prev.", text)
    demo = (checkout / "profiles_demo" / "feeder_bench.toml").as_posix()
    text = re.sub(r"^DEMO = .*$", f"DEMO = Path({demo!r})", text, flags=re.M)
    (into / "estimate_bench_prev.py").write_text(text, encoding="utf-8")
    sys.path.insert(0, str(into))
    return importlib.import_module("meas_prev.estimate"), importlib.import_module(
        "estimate_bench_prev"
    )


def _case(est_mod: ModuleType, bench: ModuleType, case: str, n: int, this: bool) -> Any:
    if case == "session":
        base = bench.demo()
        true, gains = bench.as_built(base, 11), bench.meter_gains(base, 11)
        states = [st for _, st in bench.sequence_states(base)]
        states = (states + states[3:6])[:15]
        runs = []
        for k in range(n + 1):
            rng = np.random.default_rng(12 + k)
            runs.append([bench.capture(true, st, (), rng, gains) for st in states])
        return est_mod.Estimator(base), runs
    prof = widened(bench.demo(), 4)
    true, gains = bench.as_built(prof, 11), bench.meter_gains(prof, 11)
    runs = [
        [bench.capture(true, STATE, (), np.random.default_rng(11 + k), gains)] for k in range(n + 3)
    ]
    kw = {}
    if case == "per capture" and this:
        kw = {"coverage": est_mod.RATIO_KINDS}
    return est_mod.Estimator(prof, exact=case == "exact", **kw), runs


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("older", type=pathlib.Path, help="a checkout of an earlier benchwalk")
    ap.add_argument("--captures", type=int, default=30)
    args = ap.parse_args()
    from support import estimate_bench as this_bench

    import meas.estimate as this_est

    with tempfile.TemporaryDirectory() as tmp:
        prev_est, prev_bench = _earlier(args.older.resolve(), pathlib.Path(tmp))
        print(f"{'case':34} {'earlier':>10} {'this':>10} {'ratio':>6}")
        for case, n in (
            ("per capture", args.captures),
            ("every coverage kind", args.captures),
            ("exact", max(args.captures // 2, 5)),
            ("session", max(args.captures // 5, 3)),
        ):
            e0, r0 = _case(prev_est, prev_bench, case, n, False)
            e1, r1 = _case(this_est, this_bench, case, n, True)
            for c in r0[n:]:
                e0.run(c)
            for c in r1[n:]:
                e1.run(c)
            t0, t1 = [], []
            for k in range(n):
                t = time.process_time()
                e0.run(r0[k])
                t0.append(time.process_time() - t)
                t = time.process_time()
                e1.run(r1[k])
                t1.append(time.process_time() - t)
            m0, m1 = statistics.median(t0) * 1e3, statistics.median(t1) * 1e3
            label = case + (", 15 steps, 8 meters" if case == "session" else ", 32 meters")
            print(f"{label:34} {m0:7.1f} ms {m1:7.1f} ms {m1 / m0:6.2f}")


if __name__ == "__main__":
    main()
