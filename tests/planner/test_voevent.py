"""VOEvent 2.0 packets: the shipped examples load; packets lacking what is needed fail in one line."""
from __future__ import annotations

import re

import pytest
from astropy.time import Time

from kncast.forecast.errors import DataFileError
from kncast.planner.events.eventfile import load_event
from kncast.planner.events.voevent import load_voevent

from conftest import DEMO

NS = "http://www.ivoa.net/xml/VOEvent/v2.0"


def packet(position=True, time=True, system="UTC-ICRS-GEO", c1="150.25", c2="-25.5", unit="deg",
           iso="2027-04-10T03:00:00.00", params='<Param name="distance" value="80" unit="Mpc"/>',
           ivorn="ivo://kncast.example/test#pkt-1", error="<Error2Radius>0.1</Error2Radius>") -> str:
    """An invented test packet in the layout of the VOEvent 2.0 schema (IVOA Recommendation, 2011)."""
    pos = (f'<Position2D unit="{unit}"><Name1>RA</Name1><Name2>Dec</Name2>'
           f"<Value2><C1>{c1}</C1><C2>{c2}</C2></Value2>{error}</Position2D>") if position else ""
    tim = f'<Time unit="s"><TimeInstant><ISOTime>{iso}</ISOTime></TimeInstant></Time>' if time else ""
    return (f'<?xml version="1.0"?>\n<voe:VOEvent xmlns:voe="{NS}" version="2.0" role="test" ivorn="{ivorn}">'
            f"<Who><Date>2027-04-10T03:10:00</Date></Who><What>{params}</What>"
            f"<WhereWhen><ObsDataLocation><ObservationLocation><AstroCoordSystem id=\"{system}\"/>"
            f'<AstroCoords coord_system_id="{system}">{tim}{pos}</AstroCoords>'
            f"</ObservationLocation></ObsDataLocation></WhereWhen></voe:VOEvent>\n")


@pytest.fixture
def write(tmp_path):
    def _write(text, name="pkt.xml"):
        p = tmp_path / name
        p.write_text(text) if isinstance(text, str) else p.write_bytes(text)
        return p
    return _write


def test_shipped_packets_load_through_the_event_loader():
    south = load_event(DEMO / "kn-demo-alert.xml")
    assert south.id == "kn-demo-alert-2027a"
    assert (south.ra_deg, south.dec_deg, south.error_radius_deg) == (150.25, -25.5, 0.05)
    assert south.distance_mpc == 95.0 and south.distance_err_mpc == 20.0 and south.ebv_mw == 0.08
    assert south.t0.isot.startswith("2027-04-10T03:00:00")
    north = load_event(DEMO / "kn-demo-alert-north.xml")
    assert north.id == "kn-demo-alert-2027b"
    assert north.distance_mpc == pytest.approx(150.0) and north.distance_err_mpc == 40.0  # 0.15 Gpc


def test_tt_time_is_converted_to_utc():
    # TT - UTC = 32.184 s + 37 leap seconds = 69.184 s in 2027 (IERS Bulletin C: no leap second
    # announced after 2017 January 1) -- the shipped packet states TT 20:41:09.184.
    north = load_voevent(DEMO / "kn-demo-alert-north.xml")
    assert abs((north.t0 - Time("2027-09-02T20:40:00", scale="utc")).sec) < 1e-3


def test_fk5_position_matches_astropy_icrs(write):
    from astropy.coordinates import FK5, SkyCoord
    import astropy.units as u

    ev = load_voevent(write(packet(system="UTC-FK5-GEO", c1="312.4", c2="41.8")))
    # independent reference: astropy's FK5(J2000) -> ICRS transformation (frame tie, IERS conventions)
    ref = SkyCoord(312.4 * u.deg, 41.8 * u.deg, frame=FK5(equinox="J2000")).icrs
    assert ev.ra_deg == pytest.approx(ref.ra.deg, abs=1e-9) and ev.dec_deg == pytest.approx(ref.dec.deg, abs=1e-9)
    assert abs(ev.ra_deg - 312.4) * 3600 < 0.1  # the FK5/ICRS offset is tens of mas (common practice)


def test_gps_time_is_19_seconds_behind_tai(write):
    ev = load_voevent(write(packet(system="GPS-ICRS-GEO", iso="2027-04-10T03:00:00")))
    # GPS = TAI - 19 s exactly; TAI - UTC = 37 s since 2017 (IERS Bulletin C) -> UTC = GPS - 18 s
    assert abs((ev.t0 - Time("2027-04-10T02:59:42", scale="utc")).sec) < 1e-3


def test_default_namespace_grouped_params_and_units(write):
    text = packet(params='<Group><Param name="DistMean" value="250" unit="kpc"/></Group>')
    text = text.replace(f'<voe:VOEvent xmlns:voe="{NS}"', f'<VOEvent xmlns="{NS}"').replace("</voe:VOEvent>", "</VOEvent>")
    ev = load_voevent(write(text))
    assert ev.distance_mpc == pytest.approx(0.25) and ev.id == "pkt-1"


def test_id_is_made_safe_for_file_names(write):
    assert load_voevent(write(packet(ivorn="ivo://kncast.example/test#a b/c:d"))).id == "a-b-c-d"
    with pytest.raises(DataFileError, match="no local id"):
        load_voevent(write(packet(ivorn="ivo://kncast.example/test#//")))


def test_distance_optional_and_id_from_path_without_fragment(write):
    ev = load_voevent(write(packet(params="", ivorn="ivo://kncast.example/test/pkt-7", error="")))
    assert ev.distance_mpc is None and ev.id == "pkt-7" and ev.error_radius_deg is None


@pytest.mark.parametrize("kwargs, element", [
    (dict(position=False), "Position2D"),
    (dict(time=False), "ISOTime"),
    (dict(c1="361"), "C1"),
    (dict(c2="-91"), "C2"),
    (dict(c1="abc"), "C1"),
    (dict(unit="rad"), "Position2D/@unit"),
    (dict(system="TCG-ICRS-GEO"), "coord_system_id"),
    (dict(system="UTC-GALACTIC-GEO"), "coord_system_id"),
    (dict(system="nonsense"), "coord_system_id"),
    (dict(iso="yesterday"), "ISOTime"),
    (dict(iso="1850-01-01T00:00:00"), "ISOTime"),
    (dict(params='<Param name="distance" value="-3" unit="Mpc"/>'), "distance"),
    (dict(params='<Param name="distance" value="3" unit="lyr"/>'), "@unit"),
    (dict(ivorn="urn:x"), "ivorn"),
])
def test_bad_packets_name_file_and_element(write, kwargs, element):
    path = write(packet(**kwargs))
    with pytest.raises(DataFileError) as err:
        load_voevent(path)
    msg = str(err.value)
    assert "\n" not in msg and str(path) in msg and element in msg


@pytest.mark.parametrize("content, words", [
    ("<VOEvent><unclosed></VOEvent>", "not well-formed XML"),
    (b"\x89PNG\r\n\x1a\n\x00\x00binary", "not well-formed XML"),
    ("", "empty"),
    ('<?xml version="1.0"?><votable/>', "not a VOEvent"),
    ('<!DOCTYPE x [<!ENTITY a "b">]><VOEvent/>', "entity"),
])
def test_corrupt_files(write, content, words):
    path = write(content)
    with pytest.raises(DataFileError, match=re.escape(words)):
        load_voevent(path)


def test_missing_file(tmp_path):
    with pytest.raises(DataFileError, match="file not found"):
        load_voevent(tmp_path / "nope.xml")


@pytest.mark.parametrize("kwargs", [dict(c2="95"), dict(position=False)])
def test_cli_exit_2_on_bad_packet(write, run_cli, kwargs):
    path = write(packet(**kwargs))
    status, out, err = run_cli("visibility", "--event", path, "--sites", "paranal", "--nights", "1")
    assert status == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1 and str(path) in lines[0] and "error" in lines[0]
