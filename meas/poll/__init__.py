"""Polling on top of the Modbus layer: poll cycles -> ``Snapshot``, and guarded switch control.

``control.py`` is the only module in benchwalk that writes to a device.
"""
