"""The Modbus layer: register codec, read plans, one endpoint's client (link), reply decoding.

Nothing here knows about poll cycles, snapshots in time or switching sequences; the poll
package (``meas.poll``) builds on it.
"""
