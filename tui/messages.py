"""Messages the poll worker posts to the main screen; the handlers alone touch the DOM."""

from __future__ import annotations

from textual.message import Message

from .frame import Frame


class FrameReady(Message):
    """One poll cycle's picture. A newer frame replaces an unhandled older one, so a burst
    after a stall collapses into one repaint; the log lines ride separately (``LogLines``)."""

    def __init__(self, frame: Frame, posted_mono: float) -> None:
        self.frame = frame
        self.posted_mono = posted_mono  # time.monotonic() when posted, for the latency figure
        super().__init__()

    def can_replace(self, message: Message) -> bool:
        return isinstance(message, FrameReady)


class LogLines(Message):
    """Event-log lines; never replaced, so no event is lost when frames collapse."""

    def __init__(self, lines: tuple[str, ...]) -> None:
        self.lines = lines
        super().__init__()


class PollTrouble(Message):
    """The poll loop hit a user-fixable error (one line); it keeps going after a pause."""

    def __init__(self, text: str) -> None:
        self.text = text
        super().__init__()
