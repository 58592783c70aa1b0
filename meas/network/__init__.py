"""The network model from the profile's nameplate data: elements, topology, load flow.

Core, not simulation: the simulated bench, the checks and the console all use it, and it never
imports ``meas.sim``.
"""
