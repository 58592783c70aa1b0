"""Fault validation speed: analysing a long COMTRADE record, and IEC 60909 at every bus.

Run:  /work/venv/bin/python benchmarks/bench_fault.py [--repeat 7]

1. A 10 kHz, 2 s, six-channel record (IA, IB, IC, VA, VB, VC and a status channel; 2013
   BINARY32, written by ``meas.fault.comtrade_write``): read and analysed per phase
   (``read_record`` + ``analyse``: DFT, AC + decaying-DC fit, peak bound), against reading the
   same file alone with ``comtrade`` (double precision, numpy), side by side. The fault lasts
   the whole record after 40 ms, the worst case for the fit (19,600 samples per phase).
2. IEC 60909-0 (3ph max, kappa C) at every bus of the demo bench, ours against pandapower
   ``calc_sc`` on the same network (net built once; each call runs the calculation), in the
   radial and the meshed (TIE closed) state; the largest |I"k| and |ip| difference is noted.
Cases are interleaved round after round (``common.interleaved``); medians are reported.
"""

from __future__ import annotations

import argparse
import logging
import sys
import tempfile
import warnings
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from common import Figure, Target, interleaved, machine_line, median, ratio  # noqa: E402

from meas.fault.comtrade_write import write_comtrade  # noqa: E402
from meas.fault.record import read_record  # noqa: E402
from meas.fault.synth import as_record, fault_waves, phase_voltages  # noqa: E402
from meas.fault.waveform import analyse  # noqa: E402
from meas.profile import load_profile  # noqa: E402
from meas.shortcircuit.iec60909 import short_circuit  # noqa: E402

DEMO = Path(__file__).resolve().parent.parent / "profiles_demo" / "feeder_bench.toml"
Z = complex(0.31441, 0.62530)


def long_record(folder: Path) -> Path:
    waves = fault_waves(
        phase_voltages(408.0, 0.0), Z, 50.0, 10_000.0, 20_000, 0.04, noise_i_a=0.05, noise_v_v=0.05
    )
    return write_comtrade(
        folder / "long", as_record(waves, 50.0, 10_000.0, 0.04), "2013", "BINARY32"
    )


def record_figure(repeat: int) -> Figure:
    import comtrade

    with tempfile.TemporaryDirectory() as d:
        path = long_record(Path(d))

        def ours() -> None:
            analyse(read_record(path))

        def read_only() -> None:
            comtrade.load(str(path), use_double_precision=True, use_numpy_arrays=True)

        times = interleaved({"ours": ours, "comtrade": read_only}, rounds=repeat)
        ik = analyse(read_record(path)).phases[0].ik_dft_a
    t_ours, t_ref = median(times["ours"]), median(times["comtrade"])
    return Figure(
        "fault",
        "analyse a 10 kHz, 2 s, 6-channel record (read + fit) vs comtrade reading it alone",
        t_ours * 1e3,
        "ms",
        t_ref * 1e3,
        ratio(t_ours, t_ref),
        (Target("ours", "<", 2000.0, "< 2 s"),),
        note=f"Ik phase A {ik:.4f} A (model 336.5635 A at 408 V)",
    )


def iec_figures(repeat: int) -> list[Figure]:
    import pandapower.shortcircuit as pp_sc

    sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests"))
    from support.pandapower_sc import demo_bench_net

    warnings.filterwarnings("ignore")
    logging.getLogger("pandapower").setLevel(logging.ERROR)
    profile = load_profile(str(DEMO))
    out = []
    for label, states in (("radial", {}), ("meshed", {"TIE": "closed"})):
        net, idx = demo_bench_net(profile, states)

        def ours(states: dict[str, str] = states) -> list:
            return [
                short_circuit(profile, b.id, switch_states=states, kappa_method="C")
                for b in profile.buses
            ]

        def theirs(net=net) -> None:  # type: ignore[no-untyped-def]
            pp_sc.calc_sc(net, fault="3ph", case="max", ip=True, kappa_method="C")

        times = interleaved({"ours": ours, "calc_sc": theirs}, rounds=repeat)
        res = net.res_bus_sc
        d_ik = max(abs(s.ikss_a / 1e3 - res.ikss_ka[idx[s.bus]]) for s in ours())
        d_ip = max(abs(s.ip_a / 1e3 - res.ip_ka[idx[s.bus]]) for s in ours())
        t_ours, t_ref = median(times["ours"]), median(times["calc_sc"])
        out.append(
            Figure(
                "fault",
                f"IEC 60909 3ph max at every bus ({len(profile.buses)}) of the demo bench, {label}, vs pandapower calc_sc",
                t_ours * 1e3,
                "ms",
                t_ref * 1e3,
                ratio(t_ours, t_ref),
                (Target("ratio", "<=", 1.0, "ratio <= 1 (not slower)"),),
                note=f'max |dI"k| {d_ik:.1e} kA, max |dip| {d_ip:.1e} kA',
            )
        )
    return out


def figures(repeat: int = 7) -> list[Figure]:
    return [record_figure(repeat), *iec_figures(repeat)]


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=7)
    args = ap.parse_args(argv)
    print(machine_line())
    print(f"{'figure':100} {'ours':>10} {'reference':>10} {'ratio':>7}  target / note")
    for f in figures(args.repeat):
        ref = f"{f.reference:10.2f}" if f.reference is not None else f"{'-':>10}"
        print(
            f"{f.figure:100} {f.ours:10.2f} {ref} {f.ratio:7.2f}  {f.target_text}: {'pass' if f.passed else 'miss'}; {f.note}"
        )
    return 0


if __name__ == "__main__":
    sys.exit(main())
