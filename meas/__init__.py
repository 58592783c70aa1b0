"""benchwalk core: everything that is not screen.

Nothing in this package imports textual or ``tui``; the whole core runs headless.
"""

__version__ = "0.1.0"
