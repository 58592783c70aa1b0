"""What the session so far can verify, per meter: the coverage table of the model-aware estimate.

For each meter and error kind (VT ratio, CT ratio, a reversed CT per phase, swapped current
inputs per pair) whether the captures so far can detect it and, for the ratios, the smallest
detectable factor; beside it the estimated voltage and current gains ± their standard
uncertainty. The numbers are ``meas.estimate``'s (``Estimate.coverage``, ``Estimate.gains``);
this module only lays them out, words first, colour repeating them.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

from rich.text import Text

from meas.estimate import Estimate

from .palette import DEFAULT, Palette

PHASES = ("A", "B", "C")
PAIRS = ("AB", "BC", "CA")
# a gain whose uncertainty is still this share of its prior was not measured: it is the prior
PRIOR_ONLY = 0.9
# (header, width) after the meter column
COLUMNS = (("VT ratio", 9), ("CT ratio", 9), ("rev. CT", 8), ("swapped I", 10))


def _ratio_cell(e: Estimate, meter: str, kind: str) -> tuple[str, str]:
    """(text, role): the smallest detectable ratio error, or why not."""
    c = e.coverage_of(meter, kind)
    if c is None:
        return "--", "muted"
    if not c.detectable:
        return "no", "warn"
    if math.isfinite(c.min_factor):
        return f"\u00b1{c.min_factor * 100:.1f} %", "ok"
    return "yes", "ok"


def _set_cell(e: Estimate, meter: str, kind: str, parts: Sequence[str]) -> tuple[str, str]:
    """(text, role): the phases or pairs whose error is detectable, ``.`` for those that are not."""
    found = [e.coverage_of(meter, f"{kind}:{p}") for p in parts]
    if all(c is None for c in found):
        return "--", "muted"
    ok = [c is not None and c.detectable for c in found]
    if not any(ok):
        return "no", "warn"
    if all(ok):
        return " ".join(parts), "ok"
    return " ".join(p if y else "." for p, y in zip(parts, ok, strict=True)), "warn"


def _gain_cell(e: Estimate, meter: str, kind: str) -> tuple[str, str]:
    g = e.gain(meter, kind)
    if g is None:
        return "--", "muted"
    if g.prior_std > 0 and g.std >= PRIOR_ONLY * g.prior_std:
        return "prior only", "muted"
    text = f"{g.value:.3f}\u00b1{g.std:.3f}"
    # beyond its class: the class limit is prior_std·√3 (a uniform limit's standard deviation)
    beyond = abs(g.value - 1.0) > math.sqrt(3.0) * g.prior_std
    return (text + " !", "error") if beyond else (text, "text")


def coverage_text(
    e: Estimate | None,
    meters: Sequence[str],
    source: str,
    pal: Palette = DEFAULT,
    busy: bool = False,
) -> Text:
    """The estimate's findings, the fit, the table (one row per meter), then each undetectable
    error with its reason. ``source`` says which captures the estimate used."""
    out = Text()
    out.append(source + "\n", style=pal.style("muted"))
    if e is None:
        out.append("estimating\u2026" if busy else "no estimate yet", style="bold")
        return out
    if not e.converged:
        out.append(f"\u2718 the estimate did not converge: {e.why}\n", style=pal.style("error"))
        out.append("coverage and gains need a converged estimate; the local checks still stand")
        return out
    for f in e.findings:
        out.append(f"\u2718 {f.sentence}\n", style=pal.style("error", bold=True))
    fit = "\u2714 fits" if e.chi2_ok else "\u2718 does not fit"
    out.append(
        f"model {fit}: chi2 {e.chi2:.1f} (99 % limit {e.chi2_limit:.1f}, {e.dof} dof), "
        f"{e.steps} step(s)\n",
        style=pal.style("ok" if e.chi2_ok else "error"),
    )
    head = f"{'meter':<6}" + "".join(f"{h:<{w}}" for h, w in COLUMNS)
    out.append(head + f"{'V gain':<14}{'I gain':<14}\n", style="bold underline")
    for mid in meters:
        out.append(f"{mid:<6}", style="bold")
        if mid not in e.meters:
            out.append("no readings in these steps (not live)\n", style=pal.style("muted"))
            continue
        cells = (
            _ratio_cell(e, mid, "vt_ratio"),
            _ratio_cell(e, mid, "ct_ratio"),
            _set_cell(e, mid, "ct_reversed", PHASES),
            _set_cell(e, mid, "phases_swapped", PAIRS),
        )
        for (text, role), (_, w) in zip(cells, COLUMNS, strict=True):
            out.append(f"{text:<{w}}", style=pal.style(role))
        for kind in ("voltage", "current"):
            text, role = _gain_cell(e, mid, kind)
            out.append(f"{text:<14}", style=pal.style(role))
        out.append("\n")
    # two short lines: one would wrap mid-phrase in the 80-column view
    out.append(
        "\u00b1x % smallest ratio error detected  no / . not detectable\n! gain beyond class\n",
        style=pal.style("muted"),
    )
    out.append_text(_reasons(e, meters, pal))
    return out


def _reasons(e: Estimate, meters: Sequence[str], pal: Palette) -> Text:
    """Why each undetectable error cannot be seen, grouped per meter and reason."""
    out = Text()
    for mid in meters:
        why: dict[str, list[str]] = {}
        for c in e.coverage:
            if c.meter != mid or c.detectable:
                continue
            label, _, reason = c.reason.partition(": ")
            kind = label.removeprefix(f"{mid} ")
            why.setdefault(reason or c.reason, []).append(kind)
        for reason, kinds in why.items():
            out.append(f"? {mid} ", style=pal.style("warn", bold=True))
            out.append(f"{_short(kinds)}: {reason}\n")
    return out


OFFSET_STEM = "offset of"
OFFSETS_NAMED = 3  # more undetectable offsets than this are counted, not listed


def _short(kinds: list[str]) -> str:
    """ "reversed CT A, reversed CT B, reversed CT C" -> "reversed CT A/B/C"; offsets of single
    readings (one per reading of a meter) -> "offsets of v_ln.A/i.B", or "offsets of 14
    readings" when there are many, so one reason stays one line."""
    groups: dict[str, list[str]] = {}
    for k in kinds:
        stem, _, last = k.rpartition(" ")
        if stem == OFFSET_STEM or (stem and last.isupper() and len(last) <= 2):
            groups.setdefault(stem, []).append(last)
        else:
            groups.setdefault(k, [])
    parts = []
    for stem, v in groups.items():
        if stem == OFFSET_STEM:
            many = len(v) > OFFSETS_NAMED
            word = "offsets" if len(v) > 1 else "offset"
            parts.append(f"offsets of {len(v)} readings" if many else f"{word} of {'/'.join(v)}")
        else:
            parts.append(f"{stem} {'/'.join(v)}" if v else stem)
    return ", ".join(parts)
