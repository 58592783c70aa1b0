"""The latest snapshot's check results, failures first, under one overall state line."""

from __future__ import annotations

from rich.text import Text
from textual.widgets import Static

from meas.results import STATUS_RANK, CheckResult, Status

from ..frame import OVERALL_MARK
from .palette import DEFAULT, Palette, palette_of

# Symbol + word for every status: readable on a monochrome terminal and without colour; the
# third item is the palette role that repeats it in colour.
STATUS_MARK = {
    Status.FAIL: ("\u2718", "FAIL", "error"),
    Status.WARN: ("!", "WARN", "warn"),
    Status.PASS: ("\u2714", "pass", "ok"),
    Status.NA: ("-", "n/a", "muted"),
}
# the overall state's badge role (palette.Palette.badge); "waiting" is plain bold text
OVERALL_BADGE = {
    "settling": "warn",
    "consistent": "ok",
    "inconsistent": "error",
    "offline": "error",
    "done": "plain",
}


def overall_text(overall: str, pal: Palette = DEFAULT) -> Text:
    sym, word = OVERALL_MARK.get(overall, ("?", overall.upper()))
    role = OVERALL_BADGE.get(overall)
    style = pal.badge(role) if role else pal.style("text", bold=True)
    return Text(f" {sym} {word} ", style=style)


def checks_text(
    results: tuple[CheckResult, ...] | list[CheckResult],
    overall: str,
    limit: int = 40,
    pal: Palette = DEFAULT,
) -> Text:
    """Overall line, then every failing and warning result with its cause, then a pass count."""
    out = Text()
    out.append_text(overall_text(overall, pal))
    ordered = sorted(results, key=lambda r: (STATUS_RANK[r.status], r.check, r.subject))
    counts = {s: 0 for s in Status}
    for r in results:
        counts[r.status] += 1
    out.append(
        f"  {counts[Status.FAIL]} fail  {counts[Status.WARN]} warn  {counts[Status.PASS]} pass  {counts[Status.NA]} n/a"
    )
    held = sum(1 for r in results if r.cause == "settling")
    if overall == "settling" and results:
        out.append(
            f"\n~ readings still moving after switching: {held} result(s) held, nothing is "
            "judged until they are steady",
            style="bold",
        )
    stood = [r for r in results if r.cause == "stood_down"]
    if stood:
        out.append(f"\n- {len(stood)} check(s) stood down: {stood[0].message}", style="bold")
    shown = 0
    for r in ordered:
        if r.status in (Status.PASS, Status.NA) or shown >= limit:
            continue
        sym, word, role = STATUS_MARK[r.status]
        out.append("\n")
        out.append(f"{sym} {word}", style=pal.style(role, bold=r.status is not Status.PASS))
        out.append(f" {r.subject} ", style="bold")
        out.append(f"{r.check}: ", style=pal.style("muted"))
        out.append(r.message or "(no message)")
        shown += 1
    if not results:
        out.append("\nno checks yet")
    elif shown == 0:
        out.append(
            f"\n\u2714 all {counts[Status.PASS]} applicable checks pass", style=pal.style("ok")
        )
    out.append_text(_model_lines(results, pal))
    return out


MODEL_FIT = "network.model_fit"  # the model-aware check (meas.checks.network.model_fit)


def _model_lines(
    results: tuple[CheckResult, ...] | list[CheckResult], pal: Palette = DEFAULT
) -> Text:
    """What the network model says: its fit of the bench, and each meter it could not verify
    (unverified is never a pass, so it is shown even when every check passes)."""
    out = Text()
    fit = [r for r in results if r.check == MODEL_FIT]
    bench = next((r for r in fit if r.subject == "bench"), None)
    if bench is not None and bench.status in (Status.PASS, Status.NA):
        out.append(f"\nmodel: {bench.message}", style=pal.style("muted"))
    unverified = sorted(
        (r for r in fit if r.cause == "unverified" and r.subject != "bench"),
        key=lambda r: r.subject,
    )
    if unverified:
        out.append(
            f"\n? {len(unverified)} meter(s) unverified against the network model:", style="bold"
        )
        for r in unverified:
            out.append(f"\n  ? {r.subject}: {r.message.removeprefix('unverified: ')}")
    return out


class ChecksPanel(Static):
    """Repaints only when the text changes (checks run at every cycle; most cycles agree)."""

    DEFAULT_CSS = "ChecksPanel { height: auto; }"

    def __init__(self, **kw) -> None:
        super().__init__("", **kw)
        self._last: tuple[str, str] | None = None

    def show(self, results: tuple[CheckResult, ...], overall: str) -> None:
        pal = palette_of(self.app)
        text = checks_text(results, overall, pal=pal)
        if (text.plain, pal.name) != self._last:
            self._last = (text.plain, pal.name)
            self.update(text)
