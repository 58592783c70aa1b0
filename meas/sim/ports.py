"""Free TCP ports on loopback, for benches started with ``--free-ports`` and for tests."""

from __future__ import annotations

import socket


def free_port(host: str = "127.0.0.1") -> int:
    """A port the OS reports free right now (bound to port 0, then released).

    Another process could take it before we bind again; servers that can learn their own
    bound port (``SimulatedBench`` does) bind port 0 directly instead.
    """
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind((host, 0))
        return int(s.getsockname()[1])
