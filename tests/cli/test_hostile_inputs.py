"""Hostile inputs and faults: every refusal is exit 2, one line, no traceback, nothing written, earlier
outputs byte-identical; nothing the user did not ask to replace is ever destroyed.

Cases by class (docs/safety.md): output folders (colliding ids, another event's plan, files kncast did
not write, a failing swap, leftovers of killed runs), output paths checked before any work, disk
full, hostile files (FIFOs, devices, folders, sizes, nesting, XML declarations and encodings, unknown
keys, duplicate ids), edge values (redshift range, leap seconds, byte-order marks), escaping of ids in
the terminal, figures and the report, and stop signals at random moments.
"""
from __future__ import annotations

import errno
import gzip
import hashlib
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
SOUTH = ROOT / "demo_events" / "kn-demo-south.toml"
ALERT = ROOT / "demo_events" / "kn-demo-alert.xml"
QUICK = ("--nights", "1", "--sites", "paranal")  # one site, one night: a plan in about 3 s

EVENT = """[event]
id = {id}
ra = "10:42:30.0"
dec = "-35:12:00"
t0 = "2027-03-14T02:17:00Z"
distance_mpc = 120.0
"""


def event_file(folder: Path, event_id: str = "kn-hostile", extra: str = "", name: str = "ev.toml") -> Path:
    path = folder / name
    path.write_text(EVENT.format(id=json.dumps(event_id)) + extra)
    return path


def snapshot(folder: Path) -> dict:
    """Relative path -> SHA-256 of every file under ``folder`` (hidden ones too)."""
    return {p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def leftovers(parent: Path) -> list[str]:
    return sorted(p.name for p in parent.iterdir() if ".kncast-" in p.name)


def refused(result, *words):
    """Exit 2, one line on stderr naming ``words``, no traceback."""
    status, _out, err = result
    assert status == 2, err
    assert "Traceback" not in err and len(err.strip().splitlines()) == 1, err
    for w in words:
        assert w in err, (w, err)
    return err


@pytest.fixture(scope="module")
def earlier(tmp_path_factory):
    """An earlier plan folder of the demo event (copied into each test that changes it)."""
    from kncast.planner.cli import main

    out = tmp_path_factory.mktemp("earlier") / "plan"
    assert main(["plan", "--event", str(SOUTH), *QUICK, "--out", str(out)]) == 0
    return out


@pytest.fixture
def previous(earlier, tmp_path):
    out = tmp_path / "plan"
    shutil.copytree(earlier, out)
    return out


# ------------------------------------------------------------------ folder names
def test_folder_names_are_readable_and_never_shared():
    from kncast.planner.plan.outfolder import folder_name

    assert folder_name("kn-demo-south") == "kn-demo-south"  # a plain id is the name itself
    assert folder_name("a_b") == "a_b"
    slash = folder_name("a/b")
    assert slash.startswith("a_b-") and slash != folder_name("a_b")
    # two ids in another script: both keep their letters, and differ (before: both became "event")
    one, two = folder_name("キロノヴァ一"), folder_name("キロノヴァ二")
    assert one == "キロノヴァ一" and two == "キロノヴァ二"
    thai, greek = folder_name("ดาว ๑"), folder_name("ΑΣΤΡΟ 1")
    assert thai != greek and " " not in thai + greek
    assert folder_name("../..").startswith("event-") and folder_name("NUL") != "NUL"  # Windows reserves NUL
    assert folder_name("x" * 300) != folder_name("x" * 299) and len(folder_name("x" * 300)) <= 69


def test_colliding_ids_get_two_folders(tmp_path, run_cli, monkeypatch):
    monkeypatch.chdir(tmp_path)
    for event_id in ("a/b", "a_b"):
        path = event_file(tmp_path, event_id, name=f"{len(event_id)}-{event_id.replace('/', '')}.toml")
        assert run_cli("plan", "--event", path, *QUICK)[0] == 0
    folders = sorted(p.name for p in (tmp_path / "kncast-out").iterdir())
    assert len(folders) == 2 and "a_b" in folders
    ids = {json.loads((tmp_path / "kncast-out" / f / "plan.json").read_text())["event"]["id"] for f in folders}
    assert ids == {"a/b", "a_b"}


# ------------------------------------------------------------------ the plan folder
def test_another_events_plan_is_kept_unless_force(previous, tmp_path, run_cli):
    before = snapshot(previous)
    other = event_file(tmp_path, "kn-other")
    refused(run_cli("plan", "--event", other, *QUICK, "--out", previous), "--out", "kn-demo-south", "--force")
    assert snapshot(previous) == before
    assert run_cli("plan", "--event", other, *QUICK, "--out", previous, "--force")[0] == 0
    assert json.loads((previous / "plan.json").read_text())["event"]["id"] == "kn-other"
    assert leftovers(tmp_path) == []


@pytest.mark.parametrize("name", ["notes.txt", "figures/my-sketch.png", "extra/data.csv"])
def test_files_kncast_did_not_write_are_never_deleted(previous, run_cli, name):
    (previous / name).parent.mkdir(exist_ok=True)
    (previous / name).write_text("keep me")
    before = snapshot(previous)
    for force in ((), ("--force",)):
        err = refused(run_cli("plan", "--event", SOUTH, *QUICK, "--out", previous, *force), "--out")
        assert name in err
    assert snapshot(previous) == before


def test_a_folder_with_a_broken_or_foreign_plan_json_is_refused(tmp_path, run_cli):
    for content in ("{not json", json.dumps({"kind": "visibility"}), json.dumps([1, 2])):
        out = tmp_path / "o"
        out.mkdir(exist_ok=True)
        (out / "plan.json").write_text(content)
        before = snapshot(out)
        refused(run_cli("plan", "--event", SOUTH, *QUICK, "--out", out), "--out", "plan.json")
        assert snapshot(out) == before


def test_plan_json_that_is_a_fifo_does_not_hang(tmp_path, run_cli):
    out = tmp_path / "o"
    out.mkdir()
    os.mkfifo(out / "plan.json")
    refused(run_cli("plan", "--event", SOUTH, *QUICK, "--out", out), "--out", "plan.json")


def test_a_failing_second_rename_restores_the_previous_folder(previous, run_cli, monkeypatch):
    import kncast.planner.output as output

    before = snapshot(previous)
    real = os.replace

    def flaky(src, dst):
        if Path(dst) == previous and ".kncast-new-" in str(src):  # the new folder into place
            raise OSError(errno.EIO, "Input/output error")
        return real(src, dst)

    monkeypatch.setattr(output.os, "replace", flaky)
    refused(run_cli("plan", "--event", SOUTH, *QUICK, "--out", previous), str(previous), "Input/output error")
    assert snapshot(previous) == before
    assert leftovers(previous.parent) == []


def test_leftovers_of_killed_runs_are_restored_or_swept(earlier, tmp_path, run_cli):
    dead = 2 ** 22 + 12345  # above the default pid_max (4194304 = 2^22 on 64-bit Linux): no such process
    # killed between the two renames: the previous folder waits aside, nothing is at the target
    aside = tmp_path / f".plan.kncast-old-{dead}-x1"
    aside.mkdir()
    shutil.copytree(earlier, aside / "x")
    (aside / "x" / "notes.txt").write_text("mine")  # proves the restored folder is checked like any other
    stale_new = tmp_path / f".plan.kncast-new-{dead}-x2"
    stale_new.mkdir()
    (stale_new / "half.ecsv").write_text("partial")
    live = tmp_path / f".plan.kncast-new-{os.getppid()}-x3"  # a running process: left alone
    live.mkdir()
    out = tmp_path / "plan"
    refused(run_cli("plan", "--event", SOUTH, *QUICK, "--out", out), "notes.txt")
    assert (out / "notes.txt").read_text() == "mine" and snapshot(out) == snapshot(aside.parent / "plan")
    assert leftovers(tmp_path) == [live.name]
    (out / "notes.txt").unlink()
    assert run_cli("plan", "--event", SOUTH, *QUICK, "--out", out)[0] == 0
    assert leftovers(tmp_path) == [live.name]


def test_an_out_symlink_is_refused(previous, tmp_path, run_cli):
    link = tmp_path / "link"
    link.symlink_to(previous, target_is_directory=True)
    refused(run_cli("plan", "--event", SOUTH, *QUICK, "--out", link), "--out", "symbolic link")


# ------------------------------------------------------------------ output paths, before any work
def test_output_paths_are_checked_before_any_work(previous, tmp_path, run_cli, monkeypatch):
    import kncast.planner.plan.core as core

    def never(*a, **k):  # the check comes before any computation
        raise AssertionError("planning started")

    monkeypatch.setattr(core, "build_plan", never)
    keep = tmp_path / "keep.json"
    keep.write_text("{}")
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    dangling = tmp_path / "dangling.json"
    dangling.symlink_to(tmp_path / "nowhere" / "x.json")
    event = event_file(tmp_path, "kn-demo-south")
    cases = [(("--json", tmp_path), "folder"), (("--json", "/dev/null"), "device"), (("--json", fifo), "FIFO"),
             (("--json", event), "--event"), (("--json", dangling), "symbolic link"),
             (("--json", previous), "folder"), (("--json", keep / "x.json"), "not a folder")]
    before = snapshot(tmp_path)
    for args, words in cases:
        refused(run_cli("plan", "--event", event, *QUICK, "--out", previous, *args), words)
    refused(run_cli("plan", "--event", event, *QUICK, "--out", event), "--out", "--event")
    same = tmp_path / "same"
    refused(run_cli("plan", "--event", event, *QUICK, "--out", same, "--json", same), "--out", "--json")
    assert snapshot(tmp_path) == before and not same.exists()
    assert Path("/dev/null").is_char_device()


@pytest.mark.parametrize("command", [("visibility",), ("lightcurve",), ("lines",)])
def test_every_command_checks_its_outputs(tmp_path, run_cli, command):
    refused(run_cli(*command, "--event", SOUTH, "--json", SOUTH), "--json", "--event")
    refused(run_cli(*command, "--event", SOUTH, "--plot", tmp_path / "a.png", "--json", tmp_path / "a.png"),
            "--json")
    assert list(tmp_path.iterdir()) == []


def test_disk_full_is_one_line_and_keeps_the_previous_folder(previous, run_cli, monkeypatch):
    import kncast.planner.output as output

    before = snapshot(previous)

    def full(path, directory=False):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(output, "_publish_mode", full)
    refused(run_cli("plan", "--event", SOUTH, *QUICK, "--out", previous), "No space left on device")
    assert snapshot(previous) == before and leftovers(previous.parent) == []


def test_disk_full_in_a_figure_worker_is_one_line(previous, run_cli, monkeypatch):
    from matplotlib.figure import Figure

    before = snapshot(previous)

    def full(self, *a, **k):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(Figure, "savefig", full)  # inherited by the forked workers
    refused(run_cli("plan", "--event", SOUTH, *QUICK, "--out", previous), "No space left on device")
    assert snapshot(previous) == before and leftovers(previous.parent) == []


def test_disk_full_for_a_json_file_keeps_the_earlier_file(tmp_path, run_cli, monkeypatch):
    import kncast.planner.output as output

    path = tmp_path / "v.json"
    path.write_text('{"earlier": true}\n')

    def full(path, directory=False):
        raise OSError(errno.EDQUOT, "Disk quota exceeded")

    monkeypatch.setattr(output, "_publish_mode", full)
    refused(run_cli("visibility", "--event", SOUTH, *QUICK, "--json", path), "Disk quota exceeded")
    assert path.read_text() == '{"earlier": true}\n' and leftovers(tmp_path) == []


# ------------------------------------------------------------------ hostile files
def test_special_files_are_refused_without_waiting(tmp_path, run_cli):
    fifo = tmp_path / "event.toml"
    os.mkfifo(fifo)
    mapfifo = tmp_path / "map.fits"
    os.mkfifo(mapfifo)
    started = time.monotonic()
    refused(run_cli("visibility", "--event", fifo), "FIFO")
    refused(run_cli("visibility", "--event", "/dev/zero"), "device")
    refused(run_cli("visibility", "--event", tmp_path), "folder")
    refused(run_cli("coverage", "--map", mapfifo, "--t0", "2027-03-14T02:17:00Z"), "FIFO")
    refused(run_cli("coverage", "--map", "/dev/zero", "--t0", "2027-03-14T02:17:00Z"), "device")
    refused(run_cli("lines", "--event", SOUTH, "--lines", fifo), "FIFO")
    refused(run_cli("exposure", "--event", SOUTH, "--setup", "x", "--phase", "1", "--time", "60", "--sky", fifo),
            "FIFO")
    assert time.monotonic() - started < 30  # nothing waited on a writer that never comes


def test_size_and_nesting_limits(tmp_path, run_cli):
    from kncast.forecast.datafiles import MAX_TEXT_BYTES

    big = event_file(tmp_path, extra="# " + "x" * MAX_TEXT_BYTES + "\n", name="big.toml")
    refused(run_cli("visibility", "--event", big), "big.toml", "too large", "4 MiB")
    deep = tmp_path / "deep.toml"
    deep.write_text(EVENT.format(id='"x"') + "[model]\nname = 'heating'\ndeep = " + "[" * 3000 + "]" * 3000 + "\n")
    refused(run_cli("visibility", "--event", deep), "deep.toml", "nested too deeply")
    long_id = event_file(tmp_path, "k" * 5000, name="long.toml")
    refused(run_cli("visibility", "--event", long_id), "long.toml", "too long")
    xml = tmp_path / "deep.xml"
    xml.write_text("<a>" * 100_000 + "</a>" * 100_000)
    refused(run_cli("visibility", "--event", xml), "deep.xml", "nested too deeply")


def test_huge_fields_end_quickly(tmp_path, run_cli):
    started = time.monotonic()
    from kncast.planner.events.model import MAX_CANDIDATES

    many = "".join(f'\n[[candidate]]\nid = "c{i}"\nra = 10.0\ndec = -30.0\n' for i in range(MAX_CANDIDATES + 1))
    refused(run_cli("visibility", "--event", event_file(tmp_path, extra=many), "--candidates"), "candidate",
            f"at most {MAX_CANDIDATES}")
    sites = tmp_path / "sites"
    sites.mkdir()
    points = ", ".join(f"{i * 0.01:.2f}" for i in range(20000))
    (sites / "wide.toml").write_text(SITE + f"\n[site.horizon]\nazimuth_deg = [{points}]\naltitude_deg = [{points}]\n")
    refused(run_cli("visibility", "--event", SOUTH, "--sites-dir", sites), "wide.toml", "horizon", "3600")
    assert time.monotonic() - started < 30


SITE = """[site]
id = "mine"
name = "A test site of our own (invented)"
latitude_deg = -30.0
longitude_deg = -70.0
elevation_m = 2000
timezone = "America/Santiago"
min_altitude_deg = 20
"""


def _packet(body_edit=lambda s: s) -> str:
    text = ALERT.read_text()
    return body_edit(text[text.index("<voe:VOEvent"):])


@pytest.mark.parametrize("encoding", ["utf-8", "utf-16", "utf-16-be", "iso-8859-1"])
def test_xml_declarations_are_refused_in_any_encoding(tmp_path, run_cli, encoding):
    # defusedxml sees the document after decoding: the declaration cannot hide in UTF-16
    for dtd in ('<!DOCTYPE VOEvent>', '<!DOCTYPE x [<!ENTITY e "boom">]>',
                '<!DOCTYPE x [<!ENTITY e SYSTEM "file:///etc/passwd">]>'):
        path = tmp_path / f"packet-{encoding}.xml"
        head = f'<?xml version="1.0" encoding="{encoding.upper()}"?>\n'
        path.write_bytes((head + dtd + "\n" + _packet()).encode(encoding))
        err = refused(run_cli("visibility", "--event", path, "--json", tmp_path / "v.json"), path.name)
        assert "DOCTYPE" in err or "cannot be decoded" in err, err  # expat reads UTF-16-BE only with a BOM
    assert not (tmp_path / "v.json").exists()


def test_xml_encodings_namespaces_and_bom(tmp_path, run_cli):
    unknown = tmp_path / "unknown.xml"
    unknown.write_text('<?xml version="1.0" encoding="x-no-such-encoding"?>\n' + _packet())
    refused(run_cli("visibility", "--event", unknown), "unknown.xml", "encoding")
    other = tmp_path / "other.xml"
    other.write_text(_packet(lambda s: s.replace("http://www.ivoa.net/xml/VOEvent/v2.0", "http://example.org/v9", 1)))
    refused(run_cli("visibility", "--event", other), "other.xml", "namespace", "VOEvent/v2.0")
    bare = tmp_path / "bare.xml"
    bare.write_text(_packet(lambda s: s.replace(' xmlns:voe="http://www.ivoa.net/xml/VOEvent/v2.0"', "", 1)
                            .replace("voe:VOEvent", "VOEvent")))
    refused(run_cli("visibility", "--event", bare), "bare.xml")
    bom = tmp_path / "bom.xml"
    bom.write_bytes(b"\xef\xbb\xbf" + ALERT.read_bytes())
    assert run_cli("visibility", "--event", bom, "--json", tmp_path / "bom.json")[0] == 0
    utf16 = tmp_path / "utf16.xml"
    utf16.write_bytes(ALERT.read_text().replace('encoding="UTF-8"', 'encoding="UTF-16"').encode("utf-16"))
    assert run_cli("visibility", "--event", utf16, "--json", tmp_path / "u.json")[0] == 0


def test_gzip_bomb_is_refused_by_its_decompressed_size(tmp_path, run_cli, monkeypatch):
    import kncast.planner.events.skymap as skymap

    monkeypatch.setattr(skymap, "MAX_MAP_BYTES", 1_000_000)  # the real limit (2 GiB) the same way, smaller
    bomb = tmp_path / "bomb.fits.gz"
    bomb.write_bytes(gzip.compress(b"\0" * 20_000_000))
    assert bomb.stat().st_size < 100_000
    refused(run_cli("coverage", "--map", bomb, "--t0", "2027-03-14T02:17:00Z"), "bomb.fits.gz", "decompressed")


def test_flat_maps_beyond_the_nside_limit_are_refused():
    from kncast.forecast.errors import DataFileError
    from kncast.planner.events.skymap import MAX_FLAT_NSIDE, _nside

    with pytest.raises(DataFileError, match="NSIDE"):
        _nside({"NSIDE": 2 * MAX_FLAT_NSIDE}, 12 * (2 * MAX_FLAT_NSIDE) ** 2, "big.fits")
    assert _nside({"NSIDE": 8}, 12 * 64, "ok.fits") == 8


@pytest.mark.parametrize("extra, key, hint", [
    ("ebv_mv = 0.1\n", "event.ebv_mv", "ebv_mw"),
    ("\n[modle]\nname = 'heating'\n", "[modle]", "model"),
    ('\n[[candidate]]\nid = "c1"\nra = 10.0\ndec = -30.0\ndecl = 1\n', "candidate[0].decl", "dec"),
])
def test_unknown_keys_in_event_files_suggest_the_closest(tmp_path, run_cli, extra, key, hint):
    text = EVENT.format(id='"x"')
    path = tmp_path / "ev.toml"
    path.write_text(text.replace('distance_mpc = 120.0\n', 'distance_mpc = 120.0\n' + extra)
                    if extra.startswith("ebv") else text + extra)
    refused(run_cli("visibility", "--event", path), "ev.toml", key, f"did you mean {hint!r}")


def test_unknown_keys_in_site_files_suggest_the_closest(tmp_path, run_cli):
    sites = tmp_path / "sites"
    sites.mkdir()
    (sites / "mine.toml").write_text(SITE.replace("elevation_m", "altitude_m"))
    refused(run_cli("visibility", "--event", SOUTH, "--sites-dir", sites), "mine.toml", "site.altitude_m",
            "unknown key; did you mean", "elevation_m")
    (sites / "mine.toml").write_text(SITE + "\n[atmospere]\npwv_mm = 2\n")
    refused(run_cli("visibility", "--event", SOUTH, "--sites-dir", sites), "mine.toml", "[atmospere]",
            "did you mean 'atmosphere'?")


def test_duplicate_candidates_and_unreadable_sites_dir(tmp_path, run_cli, monkeypatch):
    twice = '\n[[candidate]]\nid = "c1"\nra = 10.0\ndec = -30.0\n' * 2
    refused(run_cli("visibility", "--event", event_file(tmp_path, extra=twice)), "candidate[1].id", "duplicate")
    sites = tmp_path / "sites"
    sites.mkdir()
    real = os.scandir

    def no_permission(path="."):
        if Path(path) == sites:
            raise PermissionError(errno.EACCES, "Permission denied")
        return real(path)

    import kncast.planner.sites as site_module

    monkeypatch.setattr(site_module.os, "scandir", no_permission)  # root reads any folder: simulate the refusal
    refused(run_cli("visibility", "--event", SOUTH, "--sites-dir", sites), "--sites-dir", "cannot be read")


def test_control_characters_in_strings_are_refused(tmp_path, run_cli):
    path = event_file(tmp_path, "x", extra='\n[model]\nname = "heating"\n\n[[model.component]]\nname = "a\\u001b[2Jb"\n')
    refused(run_cli("visibility", "--event", path), "ev.toml", "U+001B")


# ------------------------------------------------------------------ edge values
def test_redshift_range_names_the_file_and_key(tmp_path, run_cli):
    ten = tmp_path / "z10.toml"
    ten.write_text(EVENT.format(id='"z"').replace("distance_mpc = 120.0", "redshift = 10"))
    refused(run_cli("lightcurve", "--event", ten), "z10.toml", "event.redshift", "9.5")
    # Planck 2018 (astropy.cosmology.Planck18): D_L(9.5) = 99,999.95 Mpc, inside the distance range
    edge = tmp_path / "z95.toml"
    edge.write_text(EVENT.format(id='"z"').replace("distance_mpc = 120.0", "redshift = 9.5"))
    assert run_cli("lightcurve", "--event", edge, "--json", tmp_path / "z.json")[0] == 0
    near = tmp_path / "near.toml"
    near.write_text(EVENT.format(id='"near"').replace("distance_mpc = 120.0", "distance_mpc = 1e-6"))
    assert run_cli("lightcurve", "--event", near, "--json", tmp_path / "n.json")[0] == 0
    z = json.loads((tmp_path / "n.json").read_text())["source"]["redshift"]
    # Hubble's law below z = 1e-6: z = d H0 / c with H0 = 67.66 km/s/Mpc (Planck18), c = 299792.458 km/s
    assert z == pytest.approx(1e-6 * 67.66 / 299792.458, rel=1e-3)


def test_leap_seconds_and_byte_order_marks(tmp_path, run_cli):
    # 2016-12-31T23:59:60 UTC is a leap second (IERS Bulletin C 52); 2027-03-14 ends without one
    leap = tmp_path / "leap.toml"
    leap.write_bytes(b"\xef\xbb\xbf" + EVENT.format(id='"leap"').replace("2027-03-14T02:17:00Z",
                                                                         "2016-12-31T23:59:60Z").encode())
    assert run_cli("visibility", "--event", leap, *QUICK, "--json", tmp_path / "l.json")[0] == 0
    assert json.loads((tmp_path / "l.json").read_text())["event"]["t0_utc"].startswith("2016-12-31T23:59:")
    fake = tmp_path / "fake.toml"
    fake.write_text(EVENT.format(id='"x"').replace("02:17:00Z", "23:59:60Z"))
    refused(run_cli("visibility", "--event", fake), "fake.toml", "leap second")


# ------------------------------------------------------------------ escaping
HOSTILE_ID = "[bold]kn[/] $\\alpha$ <script>x</script> :smile:"


def test_ids_are_shown_as_written_everywhere(tmp_path, run_cli):
    path = event_file(tmp_path, HOSTILE_ID)
    status, out, err = run_cli("visibility", "--event", path, *QUICK, "--plot", tmp_path / "v.png")
    assert status == 0, err
    assert "[bold]kn[/] $\\alpha$ <script>x</script> :smile:" in out  # rich markup and emoji codes not applied
    plan = tmp_path / "plan"
    status, out, err = run_cli("plan", "--event", path, *QUICK, "--out", plan)
    assert status == 0, err
    md, html = (plan / "report.md").read_text(), (plan / "report.html").read_text()
    assert "<script>" not in md and "&lt;script>x&lt;/script>" in md  # raw HTML neutralised in Markdown
    assert "<script>" not in html and "&lt;script&gt;" in html
    assert json.loads((plan / "plan.json").read_text())["event"]["id"] == HOSTILE_ID


def test_figure_text_is_not_typeset():
    from kncast.planner.figures.text import plain

    assert plain("a$b$c") == r"a\$b\$c"
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    fig, ax = plt.subplots()
    ax.set_title(plain("kn $\\nosuchcommand$"))
    fig.canvas.draw()  # an escaped dollar is drawn, never parsed (unescaped, this raises ValueError)
    plt.close(fig)


def test_save_figure_draws_untypesettable_text_as_written(tmp_path):
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from kncast.planner.output import save_figure

    fig, ax = plt.subplots()
    ax.set_title("kn $\\nosuchcommand$")
    save_figure(fig, tmp_path / "f.png")
    assert (tmp_path / "f.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (ISO/IEC 15948)


# ------------------------------------------------------------------ stop signals
def _kncast(*args, cwd, ignore=()):
    env = {**os.environ, "MPLBACKEND": "Agg"}

    def start():
        for s in ignore:  # as nohup does for SIGHUP
            signal.signal(s, signal.SIG_IGN)

    return subprocess.Popen([sys.executable, "-m", "kncast.planner.cli", *map(str, args)], cwd=cwd, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, preexec_fn=start)


STOPS = [(signal.SIGINT, 0.3), (signal.SIGTERM, 1.5), (signal.SIGHUP, 2.5), (signal.SIGTERM, 3.5),
         (signal.SIGINT, 5.0)]


def test_stop_signals_at_any_moment_keep_the_previous_folder(previous, tmp_path):
    """A plan stopped at moments from start-up to the folder swap: exit 128 + n (or a finished plan), one
    line, no worker traceback, the previous folder byte-identical; the next run leaves no temporary folder."""
    before = snapshot(previous)
    for signum, delay in STOPS:
        proc = _kncast("plan", "--event", SOUTH, *QUICK, "--out", previous, cwd=tmp_path)
        time.sleep(delay)
        proc.send_signal(signum)
        out, err = proc.communicate(timeout=120)
        assert "Traceback" not in err, err
        if proc.returncode in (0, -signum):  # done before the signal (or killed while Python shut down after
            doc = json.loads((previous / "plan.json").read_text())  # main returned): a complete plan, or the old
            assert doc["event"]["id"] == "kn-demo-south"
            assert all((previous / f).is_file() for f in doc["files"]["figures"])
            before = snapshot(previous)
            continue
        assert proc.returncode == 128 + signum, (signum, delay, proc.returncode, err)
        assert len(err.strip().splitlines()) == 1 and signal.Signals(signum).name in err, err
        assert snapshot(previous) == before, (signum, delay)
        assert leftovers(previous.parent) == []
    proc = _kncast("plan", "--event", SOUTH, *QUICK, "--out", previous, cwd=tmp_path)
    proc.communicate(timeout=120)
    assert proc.returncode == 0 and leftovers(previous.parent) == []


def test_sigkill_between_the_renames_is_repaired_by_the_next_run(previous, tmp_path):
    """SIGKILL cannot be handled: simulate its worst moment (previous folder aside, nothing in place) and
    check that the next run puts the previous folder back before deciding anything."""
    from kncast.planner.output import sweep_stale

    before = snapshot(previous)
    aside = tmp_path / f".plan.kncast-old-{2 ** 22 + 7}-zz"
    aside.mkdir()
    os.replace(previous, aside / "x")
    assert not previous.exists()
    sweep_stale(previous)
    assert snapshot(previous) == before and leftovers(tmp_path) == []


def test_a_signal_ignored_by_the_caller_stays_ignored(previous, tmp_path):
    """Under nohup (SIGHUP ignored) a hang-up does not stop the plan; the figure workers ignore it too."""
    proc = _kncast("plan", "--event", SOUTH, *QUICK, "--out", previous, cwd=tmp_path, ignore=(signal.SIGHUP,))
    time.sleep(1.5)
    proc.send_signal(signal.SIGHUP)
    _out, err = proc.communicate(timeout=120)
    assert proc.returncode == 0, err
    assert leftovers(previous.parent) == []
