"""The report tests' network guard (conftest.no_network) refuses every address off this machine
and lets loopback through (a local dask cluster's scheduler lives there)."""

from __future__ import annotations

import socket

import pytest


def test_an_outside_address_is_refused():
    # 192.0.2.0/24 is TEST-NET-1, reserved for documentation (RFC 5737): never a real host
    with pytest.raises(OSError, match="network access is not allowed"):
        socket.create_connection(("192.0.2.1", 80), timeout=1)
    s = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    try:
        with pytest.raises(OSError, match="network access is not allowed"):
            s.connect(("192.0.2.1", 80))
    finally:
        s.close()


def test_loopback_is_let_through():
    server = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    server.bind(("127.0.0.1", 0))
    server.listen(1)
    try:
        with socket.create_connection(server.getsockname(), timeout=5):
            pass
    finally:
        server.close()
