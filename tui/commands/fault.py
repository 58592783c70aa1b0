"""``benchwalk fault``: IEC 60909 predictions, staged-fault records checked against them, and a
simulated staged fault.

- ``fault predict PROFILE``: I"k, ip, Ib, Ik, Ith, R/X, |Zk| at every bus (or ``--bus``);
- ``fault check RECORD --profile P --bus B``: measured against predicted, writes
  ``summary.json``, ``phases.csv`` and ``waveform.svg``; exit 0 pass, 1 a figure failed or is
  unverified, 2 a problem with the record, profile or options;
- ``fault simulate PROFILE --bus B --out STEM``: writes the COMTRADE record a recorder would
  take of a bolted fault on the simulated bench.
Only recordings are analysed; nothing is staged or switched.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path
from typing import TYPE_CHECKING

from meas.cautions import STAGED_FAULT_CAUTION
from meas.errors import BenchwalkError

from .common import comma_list, name_value_pairs

if TYPE_CHECKING:
    from meas.fault.comtrade_write import DataFormat, Revision
    from meas.model import Profile

HELP = "IEC 60909 at the buses, a recorded staged fault against the model, a simulated staged-fault record"
_FORMATS: dict[str, tuple[Revision, DataFormat]] = {
    "1999-ascii": ("1999", "ASCII"),
    "1999-binary": ("1999", "BINARY"),
    "2013-binary32": ("2013", "BINARY32"),
    "2013-float32": ("2013", "FLOAT32"),
    "2013-ascii": ("2013", "ASCII"),
}


def _names(text: str | None) -> list[str] | None:
    return list(comma_list(text)) if text else None


def _ratio(text: str | None) -> tuple[float, float] | None:
    if not text:
        return None
    try:
        a, b = (float(x) for x in text.split("/"))
    except ValueError:
        raise BenchwalkError(f"ratio {text!r}: write PRIMARY/SECONDARY, e.g. 600/1") from None
    return a, b


def _model_options(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--fault", choices=("3ph", "2ph", "1ph"), default="3ph", help="fault kind (default 3ph)"
    )
    p.add_argument(
        "--scale",
        choices=("bench", "network"),
        default="bench",
        help="bench SI values or the network they stand for",
    )
    p.add_argument(
        "--kappa",
        choices=("B", "C"),
        default="C",
        help="kappa method in meshed networks (IEC 60909-0 §8.1.3)",
    )
    p.add_argument(
        "--lv-tol",
        type=float,
        choices=(6.0, 10.0),
        default=10.0,
        help="LV voltage tolerance for c (percent)",
    )
    p.add_argument(
        "--switch",
        action="append",
        default=[],
        metavar="ID=open|closed",
        help="switch state other than normal (repeatable)",
    )
    p.add_argument(
        "--covariance",
        type=Path,
        help="parameter covariance (.json or .csv, docs/fault-validation.md) from a calibration",
    )


def add_arguments(parser: argparse.ArgumentParser) -> None:
    sub = parser.add_subparsers(dest="action", metavar="ACTION", required=True)
    pr = sub.add_parser(
        "predict", help="IEC 60909-0 short-circuit currents at every bus of a profile"
    )
    pr.add_argument("profile", metavar="PROFILE", help="bench profile (TOML), calibrated or not")
    pr.add_argument("--bus", help="one bus only")
    pr.add_argument("--case", choices=("max", "min"), default="max")
    pr.add_argument("--tk", type=float, default=1.0, help="duration for Ith, s (default 1)")
    _model_options(pr)
    ck = sub.add_parser(
        "check", help="compare a recorded staged fault (COMTRADE) with the model's prediction"
    )
    ck.add_argument(
        "record", metavar="RECORD", type=Path, help="COMTRADE .cfg (with its .dat) or .cff"
    )
    ck.add_argument("--profile", required=True, help="bench profile (TOML), e.g. a calibrated one")
    ck.add_argument("--bus", required=True, help="the faulted bus")
    ck.add_argument(
        "--currents", help="current channels, e.g. IA,IB,IC (default: by unit and phase)"
    )
    ck.add_argument(
        "--voltages",
        help="phase-to-ground voltage channels at the faulted bus, in the order of --currents, e.g. VA,VB,VC",
    )
    ck.add_argument(
        "--as-recorded",
        action="store_true",
        help="take values as the file holds them; do not apply the primary/secondary ratios",
    )
    ck.add_argument(
        "--rec-class",
        type=float,
        default=1.0,
        metavar="PCT",
        help="recorder + CT/VT limit of error, percent (default 1)",
    )
    ck.add_argument(
        "--out",
        type=Path,
        help="folder for summary.json, phases.csv, waveform.svg (default: RECORD's name + -fault)",
    )
    _model_options(ck)
    sm = sub.add_parser(
        "simulate", help="write the COMTRADE record of a bolted fault on the simulated bench"
    )
    sm.add_argument("profile", metavar="PROFILE", help="bench profile (TOML)")
    sm.add_argument("--bus", required=True, help="the faulted bus")
    sm.add_argument("--out", type=Path, required=True, help="record path without suffix")
    sm.add_argument(
        "--angle",
        type=float,
        default=0.0,
        help="phase-A voltage angle at inception, degrees (sine; 0 = voltage zero)",
    )
    sm.add_argument("--fs", type=float, default=10_000.0, help="sampling rate, Hz (default 10000)")
    sm.add_argument("--duration", type=float, default=0.2, help="record length, s (default 0.2)")
    sm.add_argument(
        "--at", type=float, default=0.04, help="inception time in the record, s (default 0.04)"
    )
    sm.add_argument(
        "--noise",
        type=float,
        default=0.02,
        metavar="PCT",
        help="recorder noise, percent of the fault current and voltage peaks",
    )
    sm.add_argument("--seed", type=int, default=0)
    sm.add_argument("--format", choices=tuple(_FORMATS), default="2013-binary32")
    sm.add_argument("--cff", action="store_true", help="one .cff file (2013 formats)")
    sm.add_argument("--ct", help="write secondary currents with this CT ratio, e.g. 600/1")
    sm.add_argument("--vt", help="write secondary voltages with this VT ratio, e.g. 400/100")
    sm.add_argument(
        "--set",
        action="append",
        default=[],
        metavar="BRANCH.key=VALUE",
        help="as-built parameter differing from the profile (repeatable)",
    )
    sm.add_argument("--switch", action="append", default=[], metavar="ID=open|closed")
    sm.add_argument(
        "--fault",
        choices=("3ph", "2ph", "1ph"),
        default="3ph",
        help="3ph, 2ph (B-C) or 1ph (A-earth)",
    )


def _predict(args: argparse.Namespace) -> int:
    from meas.profile import load_profile
    from meas.shortcircuit.iec60909 import short_circuit

    profile = load_profile(args.profile)
    buses = [args.bus] if args.bus else [b.id for b in profile.buses]
    states = name_value_pairs(args.switch, "--switch")
    print(
        f"IEC 60909-0 {args.fault} {args.case}, {args.scale} scale, kappa method {args.kappa}; {profile.path}"
    )
    heads = ("c", 'I"k A', "ip A", "Ib=Ik A", "Ith A", "kappa", "R/X", "|Zk| ohm")
    print("bus     " + "".join(f"{h:>12}" for h in heads) + "  kappa from")
    for b in buses:
        try:
            s = short_circuit(
                profile,
                b,
                args.fault,
                args.case,
                switch_states=states,
                kappa_method=args.kappa,
                lv_tol_pct=args.lv_tol,
                tk_s=args.tk,
                scale=args.scale,
            )
        except BenchwalkError as exc:
            if args.bus:
                raise
            print(f"{b:8}  -- {exc}")
            continue
        vals = (
            f"{s.c:.2f}",
            *(f"{v:.5g}" for v in (s.ikss_a, s.ip_a, s.ik_a, s.ith_a)),
            f"{s.kappa:.4f}",
            f"{s.r_x:.4f}",
            f"{s.zk_abs_ohm:.5g}",
        )
        print(f"{b:8}" + "".join(f"{v:>12}" for v in vals) + f"  {s.kappa_method}")
    if args.covariance:
        _uncertainty(args, profile, buses, states)
    return 0


def _uncertainty(
    args: argparse.Namespace, profile: Profile, buses: list[str], states: dict[str, str]
) -> None:
    from meas.fault.inputs import read_covariance
    from meas.shortcircuit.iec60909 import short_circuit
    from meas.shortcircuit.uncertainty import propagate

    cov = read_covariance(args.covariance)
    print(f"standard uncertainty from {args.covariance} (delta method):")
    for b in buses:

        def ev(pr: Profile, b: str = b) -> dict[str, float]:
            s = short_circuit(
                pr,
                b,
                args.fault,
                args.case,
                switch_states=states,
                kappa_method=args.kappa,
                lv_tol_pct=args.lv_tol,
                scale=args.scale,
            )
            return {"ikss": s.ikss_a, "ip": s.ip_a}

        u = propagate(profile, cov, ev)
        print(f'  {b:8} u(I"k) {u["ikss"]:.4g} A  u(ip) {u["ip"]:.4g} A')


def _check(args: argparse.Namespace) -> int:
    from meas.fault.compare import compare
    from meas.fault.inputs import read_covariance
    from meas.fault.outputs import write_outputs
    from meas.fault.record import read_record
    from meas.fault.waveform import analyse
    from meas.profile import load_profile

    profile = load_profile(args.profile)
    cov = read_covariance(args.covariance) if args.covariance else None
    record = read_record(
        args.record, _names(args.currents), _names(args.voltages), as_recorded=args.as_recorded
    )
    analysis = analyse(record, voltage_angle=args.fault != "2ph")
    comp = compare(
        analysis,
        profile,
        args.bus,
        fault=args.fault,
        scale=args.scale,
        switch_states=name_value_pairs(args.switch, "--switch"),
        covariance=cov,
        rec_class_pct=args.rec_class,
        kappa_method=args.kappa,
        lv_tol_pct=args.lv_tol,
    )
    out = args.out or args.record.with_name(args.record.stem + "-fault")
    paths = write_outputs(out, record, analysis, comp, profile.path)
    print(
        f"record {record.path}: COMTRADE {record.revision} {record.data_format}, {record.fs_hz:g} samples/s, values {record.values}"
    )
    for note in record.notes:
        print(f"  {note}")
    print(
        f"inception {analysis.inception_s * 1e3:.3f} ms, U_pre {comp.u_pre_ll_v:.5g} V (L-L), c = U_pre/Un = {comp.c_like:.4f}; fault {comp.fault} at {comp.bus}, {comp.scale} scale"
    )
    print(
        f'IEC band: I"k {comp.iec_min.ikss_a:.5g} A (cmin {comp.iec_min.c:.2f}) to {comp.iec_max.ikss_a:.5g} A (cmax {comp.iec_max.c:.2f}); measured {"inside" if comp.in_iec_band else "OUTSIDE"}'
    )
    print(f"prediction uncertainty from the {comp.uncertainty_source}")
    print(
        f"{'figure':38}{'measured':>12}{'predicted':>12}{'dev %':>9}{'|dev|':>10}{'limit':>10}  verdict"
    )
    for f in comp.figures:
        print(
            f"{f.label + (' ' + f.unit if f.unit else ''):38}{f.measured:12.6g}{f.predicted:12.6g}{f.deviation_pct:9.3f}{abs(f.deviation):10.4g}{f.limit:10.4g}  {f.verdict}"
        )
    print(
        f"verdict: {comp.verdict}; wrote {paths['summary']}, {paths['phases'].name}, {paths['waveform'].name}"
    )
    return 0 if comp.verdict == "pass" else 1


def _simulate(args: argparse.Namespace) -> int:
    from meas.fault.staged import as_built, stage_fault
    from meas.profile import load_profile

    profile = load_profile(args.profile)
    values = {}
    for k, v in name_value_pairs(args.set, "--set").items():
        try:
            values[k] = float(v)
        except ValueError:
            raise BenchwalkError(f"--set {k}={v}: the value must be a number") from None
    built = as_built(profile, values) if values else profile
    rev, fmt = _FORMATS[args.format]
    sf = stage_fault(
        built,
        args.bus,
        args.out,
        switch_states=name_value_pairs(args.switch, "--switch"),
        alpha_deg=args.angle,
        fs_hz=args.fs,
        duration_s=args.duration,
        t_fault_s=args.at,
        noise_pct=args.noise,
        seed=args.seed,
        revision=rev,
        data_format=fmt,
        cff=args.cff,
        ct=_ratio(args.ct),
        vt=_ratio(args.vt),
        kind=args.fault,
    )
    print(
        f"SIMULATION: wrote {sf.path} (COMTRADE {rev} {fmt}): bolted {args.fault} fault at {sf.bus}, current of {sf.branch}, inception at {args.angle:g} deg of V_A"
    )
    print(
        f"  model: Zk {sf.z_ohm.real:.6g} + j{sf.z_ohm.imag:.6g} ohm, U_pre {sf.u_pre_ll_v:.6g} V, Ik {sf.ik_a:.6g} A"
        + (f"; as built: {', '.join(f'{k}={v:g}' for k, v in values.items())}" if values else "")
    )
    return 0


def main(args: argparse.Namespace) -> int:
    print(
        STAGED_FAULT_CAUTION,
        file=sys.stderr if args.action == "predict" else sys.stdout,
        flush=True,
    )
    return {"predict": _predict, "check": _check, "simulate": _simulate}[args.action](args)
