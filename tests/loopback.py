"""Loopback helpers for tests that start servers (uvicorn, Dask, PostgreSQL)."""

from __future__ import annotations

import socket


def free_port() -> int:
    """A TCP port on 127.0.0.1 that nothing listens on now (the OS picks it)."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]
