"""A full visibility run must not open a single network connection.

Every way Python reaches the network goes through ``socket.socket``,
``socket.create_connection`` or name resolution (``getaddrinfo``); all are
replaced by tripwires that record the attempt and raise.  The run must
succeed and the record must stay empty.
"""
from __future__ import annotations

import json
import socket

import pytest


@pytest.fixture
def no_network(monkeypatch):
    attempts: list[str] = []

    def tripwire(name):
        def refuse(*args, **kwargs):
            attempts.append(f"{name}{args[:2]!r}")
            raise OSError(f"network access attempted during an offline run: {name}")

        return refuse

    import ssl  # noqa: F401  (imported before patching: ssl.SSLSocket subclasses the real socket class)

    class TripwireSocket(socket.socket):
        def __init__(self, *args, **kwargs):
            attempts.append(f"socket.socket{args[:2]!r}")
            raise OSError("network access attempted during an offline run: socket.socket")

    monkeypatch.setattr(socket, "socket", TripwireSocket)
    monkeypatch.setattr(socket, "create_connection", tripwire("socket.create_connection"))
    monkeypatch.setattr(socket, "getaddrinfo", tripwire("socket.getaddrinfo"))
    return attempts


def test_full_visibility_run_opens_no_socket(no_network, run_cli, tmp_path, demo_event_path):
    out_json, out_png = tmp_path / "v.json", tmp_path / "v.png"
    # more nights than the IERS predictions may cover exercises the "stale tables" path as well
    status, out, err = run_cli("visibility", "--event", demo_event_path, "--nights", "4", "--min-moon-sep", "20",
                               "--max-airmass", "3", "--json", out_json, "--plot", out_png)
    assert status == 0, err
    assert no_network == []
    doc = json.loads(out_json.read_text())
    assert doc["kind"] == "visibility" and len(doc["nights"]) >= 4
    assert out_png.stat().st_size > 0


def test_skyfield_loaders_open_no_socket(no_network):
    from kncast.planner._offline import skyfield_ephemeris, skyfield_timescale

    skyfield_timescale.cache_clear()
    skyfield_ephemeris.cache_clear()
    ts = skyfield_timescale()
    eph = skyfield_ephemeris()
    assert eph["moon"] is not None and ts.utc(2027, 3, 14).tt > 2.4e6
    assert no_network == []


def test_tripwire_really_trips(no_network):
    # the fixture itself works: a connection attempt is refused and recorded
    with pytest.raises(OSError):
        socket.create_connection(("example.org", 80), timeout=0.1)
    with pytest.raises(OSError):
        socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    with pytest.raises(OSError):
        socket.getaddrinfo("example.org", 443)
    assert len(no_network) == 3
    no_network.clear()
