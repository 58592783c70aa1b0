"""The console's colours, taken from the app's theme and made readable on its background.

Widgets that paint Rich text (the Line-API readings grid, the checks, step, bench, phasor and
trend panes) read their styles from one ``Palette`` built from the current theme's variables
(``$text-success``, ``$text-warning``, ``$text-error``, ``$text-primary``, ``$foreground``,
``$background``, ``$success``, ``$warning``, ``$error``, ``$accent``), so a light theme gives
dark text and a dark theme light text. A theme colour that would fall under the WCAG 2.1
§1.4.3 contrast minimum for normal text (4.5:1) against the theme background is moved toward
black or white until it meets it: the words carry every state, and colour must not hide them.
The same colours are offered to ``console.tcss`` as ``$bw-ok``, ``$bw-warn``, ``$bw-error``,
``$bw-muted``, ``$bw-accent`` (``css_variables``).
"""

from __future__ import annotations

from dataclasses import dataclass

from rich.style import Style
from textual.color import Color, ColorParseError
from textual.theme import BUILTIN_THEMES, Theme

# WCAG 2.1 §1.4.3 (contrast, minimum): 4.5:1 for normal text; §1.4.11 (non-text contrast):
# 3:1 for graphical objects such as the panes' border lines
MIN_CONTRAST = 4.5
MIN_GRAPHIC_CONTRAST = 3.0
_BLACK, _WHITE = Color(0, 0, 0), Color(255, 255, 255)


def luminance(c: Color) -> float:
    """Relative luminance of an sRGB colour (WCAG 2.1 definition of relative luminance)."""

    def lin(v: int) -> float:
        s = v / 255
        return s / 12.92 if s <= 0.04045 else ((s + 0.055) / 1.055) ** 2.4

    r, g, b = c.rgb
    return 0.2126 * lin(r) + 0.7152 * lin(g) + 0.0722 * lin(b)


def contrast_ratio(a: Color, b: Color) -> float:
    """(L1 + 0.05) / (L2 + 0.05), the lighter over the darker (WCAG 2.1 contrast ratio)."""
    la, lb = luminance(a), luminance(b)
    hi, lo = max(la, lb), min(la, lb)
    return (hi + 0.05) / (lo + 0.05)


def readable(colour: Color, background: Color, minimum: float = MIN_CONTRAST) -> Color:
    """``colour``, or the least blend of it toward black or white that reaches ``minimum``
    against ``background`` (toward whichever end contrasts more with the background)."""
    if contrast_ratio(colour, background) >= minimum:
        return colour
    end = (
        _BLACK
        if contrast_ratio(_BLACK, background) >= contrast_ratio(_WHITE, background)
        else _WHITE
    )
    for step in range(1, 21):
        mixed = colour.blend(end, step / 20)
        if contrast_ratio(mixed, background) >= minimum:
            return mixed
    return end


def _solid(text: str, under: Color, fallback: Color) -> Color:
    try:
        c = Color.parse(text)
    except ColorParseError:
        return fallback
    return under.blend(c.with_alpha(1.0), c.a) if c.a < 1 else c


@dataclass(frozen=True)
class Palette:
    """Rich styles for one theme; every text colour meets ``MIN_CONTRAST`` on ``background``."""

    name: str
    dark: bool
    background: Color
    foreground: Color
    ok: Color
    warn: Color
    error: Color
    accent: Color  # trend bars and other drawing
    muted: Color  # secondary text (instead of the terminal's dim, which light themes wash out)
    badge_bg: dict[str, Color]  # role -> background of a badge (a state word on colour)

    def style(self, role: str, *, bold: bool = False) -> Style:
        """Text in a role's colour: ``ok``, ``warn``, ``error``, ``accent``, ``muted``, ``text``."""
        colour = self.foreground if role == "text" else getattr(self, role)
        return Style(color=colour.rich_color, bold=bold)

    def badge(self, role: str) -> Style:
        """A state word on a coloured block (``ok``, ``warn``, ``error``, ``sim``, ``plain``):
        black or white text, whichever contrasts more, on the theme's colour for that role,
        adjusted if neither reaches ``MIN_CONTRAST``."""
        bg = self.badge_bg.get(role)
        if bg is None:  # plain: the foreground as background (a reversed word)
            return Style(
                color=self.background.rich_color, bgcolor=self.foreground.rich_color, bold=True
            )
        fg = badge_text(bg)
        return Style(color=fg.rich_color, bgcolor=bg.rich_color, bold=True)


def badge_text(bg: Color) -> Color:
    """Black or white, whichever reads better on ``bg``."""
    return _BLACK if contrast_ratio(_BLACK, bg) >= contrast_ratio(_WHITE, bg) else _WHITE


def _badge_bg(colour: Color) -> Color:
    """A badge background on which black or white text reaches the minimum."""
    if max(contrast_ratio(_BLACK, colour), contrast_ratio(_WHITE, colour)) >= MIN_CONTRAST:
        return colour
    # too mid-grey for either: push it toward the end that already reads better
    toward = _WHITE if contrast_ratio(_BLACK, colour) >= contrast_ratio(_WHITE, colour) else _BLACK
    for step in range(1, 21):
        mixed = colour.blend(toward, step / 20)
        if max(contrast_ratio(_BLACK, mixed), contrast_ratio(_WHITE, mixed)) >= MIN_CONTRAST:
            return mixed
    return toward


_CACHE: dict[tuple[str, str, str | None, str | None], Palette] = {}


def palette_for(theme: Theme) -> Palette:
    """The palette of a theme, from its colour system's variables (as textual's CSS sees them)."""
    key = (theme.name, theme.primary, theme.background, theme.foreground)
    if key not in _CACHE:
        _CACHE[key] = _build(theme)
    return _CACHE[key]


def _build(theme: Theme) -> Palette:
    v = {**theme.to_color_system().generate(), **theme.variables}
    dark_default = _BLACK if not theme.dark else Color(18, 18, 18)
    bg = _solid(v.get("background", ""), dark_default, dark_default)
    # an ANSI theme names the terminal's own colours (its background is unknown here): they
    # are used as named, and the terminal's palette decides the contrast
    ansi = bg.ansi is not None
    fg = _solid(v.get("foreground", ""), bg, badge_text(bg))
    fg = fg if ansi else readable(fg, bg)

    def text(name: str, fallback: str) -> Color:
        c = _solid(v.get(name, v.get(fallback, "")), bg, fg)
        return c if ansi else readable(c, bg)

    muted = fg if ansi else readable(fg.blend(bg, 0.35), bg)
    return Palette(
        name=theme.name,
        dark=theme.dark,
        background=bg,
        foreground=fg,
        ok=text("success" if ansi else "text-success", "success"),
        warn=text("warning" if ansi else "text-warning", "warning"),
        error=text("error" if ansi else "text-error", "error"),
        accent=text("text-primary", "primary"),
        muted=muted,
        badge_bg={
            "ok": _badge_bg(_solid(v.get("success", ""), bg, fg)),
            "warn": _badge_bg(_solid(v.get("warning", ""), bg, fg)),
            "error": _badge_bg(_solid(v.get("error", ""), bg, fg)),
            "sim": _badge_bg(_solid(v.get("accent", v.get("secondary", "")), bg, fg)),
        },
    )


def palette_of(app: object) -> Palette:
    """The palette of an app's current theme (``textual-dark`` outside an app)."""
    theme = getattr(app, "current_theme", None)
    return palette_for(theme if isinstance(theme, Theme) else BUILTIN_THEMES["textual-dark"])


DEFAULT = palette_for(BUILTIN_THEMES["textual-dark"])


def css_variables(pal: Palette) -> dict[str, str]:
    """The palette's text colours as CSS variables for ``console.tcss``."""
    return {
        "bw-ok": pal.ok.hex6,
        "bw-warn": pal.warn.hex6,
        "bw-error": pal.error.hex6,
        "bw-muted": pal.muted.hex6,
        "bw-accent": pal.accent.hex6,
        "bw-warn-bg": pal.badge_bg["warn"].hex6,
        "bw-warn-on": badge_text(pal.badge_bg["warn"]).hex6,
        "bw-error-bg": pal.badge_bg["error"].hex6,
        "bw-error-on": badge_text(pal.badge_bg["error"]).hex6,
    }
