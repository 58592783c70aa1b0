"""Solve time and iterations of the phase-frame Newton-Raphson load flow.

Run:  /work/venv/bin/python benchmarks/bench_solver.py [--repeat N]

Cases: the demo bench in several switch states, and a generated 100-bus radial three-phase
feeder (seeded, invented data) with unbalanced constant-power loads and sequence-coupled lines.
For the feeder, pandapower's ``runpp_3ph`` is timed side by side on the same network (a ratio,
not an absolute claim: pandapower runs here without numba). Times are medians of N runs of
``build_network`` + ``solve`` (``ideal_readings`` caches per switch state on top of this).
The solver uses dense numpy linear algebra; on a machine shared by several jobs, set
OPENBLAS_NUM_THREADS=1 (BLAS threads oversubscribing the cores slowed the 300-node case ~25x);
this script sets it unless the environment already does.
"""

from __future__ import annotations

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")  # before numpy: see the docstring

import argparse  # noqa: E402
import logging  # noqa: E402
import math  # noqa: E402
import pathlib  # noqa: E402
import statistics  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402

import numpy as np  # noqa: E402

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parent))
from common import Figure, Target, interleaved, median, ratio  # noqa: E402

from meas.model import Bench, Branch, Bus, LineParams, LoadParams, Profile, SourceParams, Zone
from meas.network.admittance import build_network
from meas.network.elements import element_models
from meas.network.loadflow import solve
from meas.profile import load_profile

DEMO = pathlib.Path(__file__).resolve().parent.parent / "profiles_demo" / "feeder_bench.toml"
DEMO_STATES = {
    "normal": {},
    "meshed (TIE closed)": {"TIE": "closed"},
    "reactor in": {"RX": "closed"},
    "meshed + reactor": {"TIE": "closed", "RX": "closed"},
    "B2 islanded (SW2 open)": {"SW2": "open"},
}


def feeder(n: int = 100, seed: int = 7) -> tuple[Profile, list[tuple], list[tuple]]:
    """A random radial 400 V feeder: bus k hangs off one of the previous few buses."""
    rng = np.random.default_rng(seed)
    buses = [Bus(f"N{k}", "lv") for k in range(n)]
    branches = [Branch("SRC", "source", "N0", model=SourceParams(410.0, 2e6, 6.0))]
    lines, loads = [], []
    for k in range(1, n):
        parent = int(rng.integers(max(0, k - 4), k))
        r, x = rng.uniform(0.004, 0.012), rng.uniform(0.003, 0.008)
        b = rng.uniform(2.0, 8.0)
        lines.append((f"L{k}", parent, k, r, x, b, 3 * r, 3.5 * x, 0.6 * b))
        branches.append(
            Branch(
                f"L{k}",
                "line",
                f"N{parent}",
                f"N{k}",
                model=LineParams(r, x, b, 3 * r, 3.5 * x, 0.6 * b),
            )
        )
        p = rng.uniform(50.0, 300.0, 3)
        q = p * np.tan(np.arccos(rng.uniform(0.9, 0.99, 3)))
        loads.append((k, p, q))
        branches.append(
            Branch(
                f"LD{k}",
                "load",
                f"N{k}",
                model=LoadParams(tuple(p.tolist()), tuple(q.tolist()), "pq"),
            )
        )
    bench = Bench("feeder100", 50.0, 1.0, 100e3, (Zone("lv", 400.0, 400.0),))
    return Profile("feeder100", "", bench, {}, (), tuple(buses), tuple(branches), ()), lines, loads


def time_ours(p: Profile, states: dict, repeat: int) -> tuple[float, int, float, float]:
    models = element_models(p)
    times, sol = [], None
    for _ in range(repeat):
        t0 = time.perf_counter()
        sol = solve(build_network(p, states, models))
        times.append(time.perf_counter() - t0)
    vmin = min(
        float(np.min(np.abs(v[np.abs(v) > 0]))) for v in sol.v.values() if np.any(np.abs(v) > 0)
    )
    return (
        statistics.median(times),
        sol.iterations,
        sol.max_mismatch_va,
        vmin / (400 / math.sqrt(3)),
    )


def pandapower_case(lines: list[tuple], loads: list[tuple], n: int):
    """The same feeder as a pandapower net, and a function running ``runpp_3ph`` on it (None without pandapower)."""
    try:
        import pandapower as pp
        from pandapower.pf.runpp_3ph import runpp_3ph
    except ImportError:
        return None
    warnings.filterwarnings("ignore")
    logging.getLogger("pandapower").setLevel(
        logging.ERROR
    )  # its "numba missing" notice on every run
    net = pp.create_empty_network(f_hz=50.0, sn_mva=0.1)
    bus = [pp.create_bus(net, 0.4) for _ in range(n)]
    emf = pp.create_bus(net, 0.4)
    pp.create_ext_grid(
        net, emf, vm_pu=410 / 400, s_sc_max_mva=1e6, rx_max=0.1, x0x_max=1.0, r0x0_max=0.1
    )
    z = 410.0**2 / 2e6
    r = z / math.sqrt(37)
    pp.create_line_from_parameters(
        net,
        emf,
        bus[0],
        1.0,
        r,
        6 * r,
        0.0,
        10.0,
        r0_ohm_per_km=r,
        x0_ohm_per_km=6 * r,
        c0_nf_per_km=0.0,
    )
    w = 2 * math.pi * 50
    for _, f, t, r, x, b, r0, x0, b0 in lines:
        pp.create_line_from_parameters(
            net,
            bus[f],
            bus[t],
            1.0,
            r,
            x,
            b / w * 1e3,
            10.0,
            r0_ohm_per_km=r0,
            x0_ohm_per_km=x0,
            c0_nf_per_km=b0 / w * 1e3,
        )
    for k, p, q in loads:
        pp.create_asymmetric_load(net, bus[k], *(p / 1e6), *(q / 1e6), type="wye")
    return lambda: runpp_3ph(net, tolerance_mva=1e-10)


def time_pandapower(lines: list[tuple], loads: list[tuple], n: int, repeat: int) -> float | None:
    run = pandapower_case(lines, loads, n)
    if run is None:
        return None
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        run()
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


UPDATE_PERIOD_MS = 50.0  # the demo's update_hz = 20: a switching step re-solves within one update


def figures(repeat: int = 21) -> list[Figure]:
    """Demo bench (normal state) and the 100-bus feeder; the feeder against pandapower, interleaved."""
    demo = load_profile(str(DEMO))
    t, it, mis, _ = time_ours(demo, {}, repeat)
    out = [
        Figure(
            "solver",
            f"load flow, demo bench ({3 * len(demo.buses)} nodes, {it} iterations)",
            t * 1e3,
            "ms",
            targets=(Target("ours", "<", UPDATE_PERIOD_MS, "< 50 ms (one 20 Hz update)"),),
            note=f"max mismatch {mis:.1e} VA",
            extra={"iterations": it, "max_mismatch_va": mis},
        )
    ]
    p, lines, loads = feeder()
    models = element_models(p)
    sol = solve(build_network(p, {}, models))
    pp_run = pandapower_case(lines, loads, 100)
    cases = {"ours": lambda: solve(build_network(p, {}, models))}
    if pp_run is not None:
        cases["pandapower"] = pp_run
    times = interleaved(cases, rounds=max(3, repeat // 3))
    ours = median(times["ours"]) * 1e3
    ref = median(times["pandapower"]) * 1e3 if pp_run is not None else None
    out.append(
        Figure(
            "solver",
            f"load flow, 100-bus feeder (300 nodes, {sol.iterations} iterations) vs pandapower "
            "runpp_3ph",
            ours,
            "ms",
            ref,
            ratio(ours, ref),
            (Target("ratio", "<=", 1.0, "ratio <= 1 (not slower)"),),
            note=f"max mismatch {sol.max_mismatch_va:.1e} VA"
            + ("" if pp_run is not None else "; pandapower not installed"),
            extra={"iterations": sol.iterations, "max_mismatch_va": sol.max_mismatch_va},
        )
    )
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=21)
    args = ap.parse_args(argv)
    rows = []
    demo = load_profile(str(DEMO))
    for name, states in DEMO_STATES.items():
        rows.append(
            (f"demo: {name}", 3 * sum(1 for _ in demo.buses), *time_ours(demo, states, args.repeat))
        )
    p, lines, loads = feeder()
    t100 = time_ours(p, {}, args.repeat)
    rows.append(("feeder 100 buses, unbalanced", 300, *t100))
    print(
        f"{'case':34} {'nodes':>5} {'median ms':>10} {'iter':>4} {'max |dS| VA':>12} {'min |V| pu':>10}"
    )
    for name, nodes, t, it, mis, vmin in rows:
        print(f"{name:34} {nodes:5d} {t * 1e3:10.2f} {it:4d} {mis:12.2e} {vmin:10.4f}")
    tp = time_pandapower(lines, loads, 100, max(3, args.repeat // 4))
    if tp is not None:
        print(
            f"\nfeeder 100: pandapower runpp_3ph median {tp * 1e3:.1f} ms; ours {t100[0] * 1e3:.1f} ms; "
            f"ratio pandapower/ours = {tp / t100[0]:.1f}"
        )
    return 0


if __name__ == "__main__":
    sys.exit(main())
