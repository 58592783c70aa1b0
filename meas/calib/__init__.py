"""Calibrating the network model from a session's dataset, and planning what a campaign can
calibrate before anyone switches."""
