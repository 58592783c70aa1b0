"""Helpers the tests and benchmarks share: test benches, Modbus servers, invented data.

No test module imports another test module; they import from here."""
