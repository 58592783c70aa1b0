"""Console screens: safety caution, operator and session, main bench screen, modals, help."""
