"""Console widgets; each reads plain frames (tui.frame) and knows nothing of the runner."""
