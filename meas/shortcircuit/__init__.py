"""Short-circuit currents on the network model by IEC 60909-0 (pure functions, no I/O)."""
