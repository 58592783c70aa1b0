"""Time of the model-aware estimator (``meas.estimate``): per capture and per session.

Run:  /work/venv/bin/python benchmarks/bench_estimate.py [--repeat N]

Cases (all on the demo bench's network, the true network drawn within tolerance, seeded
class-consistent readings, no fault):
- one capture (3 snapshots, radial base case with the reactor in) with the demo's 8 meters;
- the same with 32 meters: every demo meter four times over (same buses and branches, so the
  network is the same and only the readings grow: the estimator's cost per meter);
- a joint session: 15 steps of the demo sequence (its 12 capturing steps, then the first three
  loaded ones again), 8 meters, every step a 3-snapshot capture.
Targets (issue 11): <= 20 ms per capture at 32 meters, <= 0.5 s per 15-step session.
Per capture, the estimate is the one every capture gets in a session: the check family's
(``Estimator(profile, exact=False, coverage=RATIO_KINDS)``: the fit, the bad-data statistics of
every ratio and wiring hypothesis, the linearized identification and the coverage of the ratio
kinds, which decide the unverified readings), starting where the last capture of the same
switch state ended (``meas.estimate.solver.Starts``). Beside it: the fit alone; the first
capture of a state (no earlier optimum); the linearized estimate with the coverage of every
kind, which the console's coverage view runs on demand; and the exact estimate with every
coverage kind, an offset per reading included. The joint session is the exact estimate
written at export.
Each estimator first runs ``WARM`` captures untimed: the steady state of a session, whose
captures follow one another (the first capture of a state is its own row). Medians of N runs,
each on a fresh capture, with the solver's iterations (``--cpu``: CPU time
of this process instead of wall time). Sets OPENBLAS_NUM_THREADS=1 (BLAS threads
oversubscribe a shared machine and slow small dense algebra many times; see bench_solver).
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")  # before numpy: see the docstring

import argparse  # noqa: E402
import dataclasses  # noqa: E402
import pathlib  # noqa: E402
import statistics  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402

import numpy as np  # noqa: E402

ROOT = pathlib.Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT / "tests"))
from support.estimate_bench import as_built, capture, demo, meter_gains, sequence_states  # noqa: E402

from meas.estimate import RATIO_KINDS, Estimator  # noqa: E402
from meas.estimate.solver import Starts, solve  # noqa: E402
from meas.model import Profile  # noqa: E402

WARM = 3  # captures run before timing: a session's steady state, not its first moments
STATE = {
    "CB1": "closed",
    "SW2": "closed",
    "SW3": "closed",
    "TIE": "open",
    "RX": "closed",
    "LB2": "closed",
}


def widened(profile: Profile, times: int) -> Profile:
    """The profile with every meter repeated ``times`` times (ids M1, M1b, M1c, ...)."""
    meters = list(profile.meters)
    for k in range(1, times):
        meters += [dataclasses.replace(m, id=f"{m.id}{'bcdefgh'[k - 1]}") for m in profile.meters]
    return dataclasses.replace(profile, meters=tuple(meters))


def _time(fns: list, clock=time.perf_counter) -> tuple[float, object]:
    out = None
    times = []
    for fn in fns:
        t = clock()
        out = fn()
        times.append(clock() - t)
    return statistics.median(times), out


def _fit(est: Estimator, captures: list) -> object:
    """The estimate's fit alone: terms from the readings, then the weighted least squares
    (state, gains and parameters with their covariance), without the bad-data statistics,
    the identification and the coverage that ``Estimator.run`` adds."""
    pr = est.builder.problem(captures)
    return solve(pr.steps, pr.priors, max_iter=est.max_iter, starts=est.starts)


def _cold(est: Estimator, captures: list) -> object:
    """The whole estimate with no earlier optimum to start from."""
    est.starts = Starts()
    return est.run(captures)


def figures(repeat: int = 7, clock=time.perf_counter) -> list[tuple[str, float, float, int]]:
    """(case, median seconds, target seconds, iterations).

    Every repetition estimates a fresh capture (its own noise seed): the estimator memoizes
    element admittances by parameter value, so the same capture twice would time a warm path
    no real capture takes.
    """
    base = demo()
    rows = []
    for times, label in ((1, "8 meters"), (4, "32 meters")):
        prof = widened(base, times)
        true = as_built(prof, 11)
        gains = meter_gains(prof, 11)
        caps = [
            capture(true, STATE, (), np.random.default_rng(11 + k), gains)
            for k in range(repeat + WARM)
        ]
        # per capture, the check family's estimator (as meas.checks.network.model_fit makes it)
        est = Estimator(prof, exact=False, coverage=RATIO_KINDS)
        for c in caps[repeat:]:  # warm the per-profile caches (topology, weights, last optimum)
            est.run([c])
        t, e = _time([lambda est=est, c=c: est.run([c]) for c in caps[:repeat]], clock)
        rows.append((f"one capture, {label}", t, 0.020, e.iterations))  # type: ignore[union-attr]
        t, f = _time([lambda est=est, c=c: _fit(est, [c]) for c in caps[:repeat]], clock)
        rows.append((f"  the fit alone, {label}", t, 0.020, f.iterations))  # type: ignore[union-attr]
        t, e = _time([lambda est=est, c=c: _cold(est, [c]) for c in caps[:repeat]], clock)
        rows.append((f"  first capture of a state, {label}", t, 0.020, e.iterations))  # type: ignore[union-attr]
        every = Estimator(prof, exact=False)
        for c in caps[repeat:]:
            every.run([c])
        t, e = _time([lambda est=every, c=c: est.run([c]) for c in caps[:repeat]], clock)
        rows.append((f"  coverage of every kind, {label}", t, 0.020, e.iterations))  # type: ignore[union-attr]
        full = Estimator(prof)
        for c in caps[repeat:]:
            full.run([c])
        t, e = _time([lambda est=full, c=c: est.run([c]) for c in caps[:repeat]], clock)
        rows.append((f"  exact, every coverage kind, {label}", t, 0.020, e.iterations))  # type: ignore[union-attr]
    true = as_built(base, 11)
    gains = meter_gains(base, 11)
    states = [st for _, st in sequence_states(base)]
    states = (states + states[3:6])[:15]
    sessions = []
    for k in range(max(1, repeat // 2) + 1):
        rng = np.random.default_rng(12 + k)
        sessions.append([capture(true, st, (), rng, gains) for st in states])
    est = Estimator(base)
    est.run(sessions[-1])
    t, e = _time([lambda c=c: est.run(c) for c in sessions[:-1]], clock)
    rows.append(("joint session, 15 steps, 8 meters", t, 0.5, e.iterations))  # type: ignore[union-attr]
    return rows


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=7)
    ap.add_argument(
        "--cpu",
        action="store_true",
        help="time with the process's CPU clock (a shared machine's load inflates wall time)",
    )
    args = ap.parse_args()
    clock = time.process_time if args.cpu else time.perf_counter
    print(f"{'case':40} {'median':>10} {'target':>10} {'ratio':>7} {'iter':>5}")
    for case, t, target, it in figures(args.repeat, clock):
        print(f"{case:40} {t * 1e3:8.1f} ms {target * 1e3:7.0f} ms {t / target:7.2f} {it:5d}")


if __name__ == "__main__":
    main()
