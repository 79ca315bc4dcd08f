"""The plan report a proposal can quote: the justification paragraph says what plan.json says, text from
files is shown and never run, and the page does not scroll sideways at 800 px.

The paragraph is parsed back from report.md and every number in it compared with plan.json of the same
run (the document the report must quote); hours are recomputed from the blocks' ISO 8601 start and end
with the standard library.  Browser checks use headless Chromium as tests/cli/test_report_render.py does.
"""
from __future__ import annotations

import json
import re
from datetime import datetime

import pytest

from test_report_render import CHROMIUM, _chromium, needs_chromium

from conftest import ROOT

PARA = re.compile(r"^### (?P<tel>\S+) \((?P<site>[^\n]*)\)\n\n(?P<text>[^\n]+)$", re.M)


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    from kncast.planner.cli import main

    out = tmp_path_factory.mktemp("report") / "demo"
    assert main(["demo", "--out", str(out), "--nights", "3"]) == 0
    return out, json.loads((out / "plan.json").read_text())


def _hours(b: dict) -> float:
    f = "%Y-%m-%dT%H:%M:%SZ"
    return (datetime.strptime(b["end_utc"], f) - datetime.strptime(b["start_utc"], f)).total_seconds() / 3600


def _cut(text: str, pattern: str) -> tuple[re.Match, str]:
    """The match of ``pattern`` in ``text`` and the text with it removed (what is left is checked last)."""
    m = re.search(pattern, text)
    assert m, f"{pattern!r} not in {text!r}"
    return m, text[:m.start()] + " " + text[m.end():]


def _night(doc, b):
    return next(n for n in doc["nights"] if n["site"] == b["site"] and n["night"] == b["night"])


def test_justification_numbers_are_plan_json_numbers(demo):
    out, doc = demo
    md = (out / "report.md").read_text()
    paragraphs = {m["tel"]: m["text"] for m in PARA.finditer(md)}
    telescopes = list(dict.fromkeys(b["telescope"] for b in sorted(doc["blocks"], key=lambda b: b["start_utc"])))
    assert telescopes and list(paragraphs) == telescopes  # one paragraph per telescope, no more
    ev, st = doc["event"], doc["settings"]
    for tel, text in paragraphs.items():
        blocks = sorted((b for b in doc["blocks"] if b["telescope"] == tel), key=lambda b: b["start_utc"])
        nights = list(dict.fromkeys(b["night"] for b in blocks))
        m, rest = _cut(text, r"We request (\d+) epochs? ")
        assert int(m[1]) == len(blocks)
        m, rest = _cut(rest, r"\(RA (\S+), Dec (\S+) ICRS; (\S+) deg, (\S+) deg\)")
        assert (m[1], m[2]) == (blocks[0]["ra_hms"], blocks[0]["dec_dms"])
        assert float(m[3]) == pytest.approx(blocks[0]["ra_deg"], abs=5e-6)
        assert float(m[4]) == pytest.approx(blocks[0]["dec_deg"], abs=5e-6)
        m, rest = _cut(rest, r"at (\S+) \+/- (\S+) Mpc")
        assert float(m[1]) == ev["distance_mpc"] and float(m[2]) == ev["distance_err_mpc"]
        m, rest = _cut(rest, r"on the nights? of ([-\d, ]+) \(days ([\d., ]+) after t0 = (\S+)\)")
        assert m[1].split(", ") == nights and m[3] == ev["t0_utc"]
        assert m[2].split(", ") == [f"{b['phase_d']:.2f}" for b in blocks]
        m, rest = _cut(rest, r"at (\d+) K at the first epoch and (\d+) K at the last")
        temps = [_night(doc, b)["epoch"]["photosphere"]["temperature_K"] for b in blocks]
        assert (int(m[1]), int(m[2])) == (round(temps[0]), round(temps[-1]))
        for b in blocks:
            m, rest = _cut(rest, r"day (\d+\.\d\d), (\d+) x (\d+) s \(16-84% range of the total (\d+)-(\d+) s\)")
            r = b["exposure_range_s"]
            assert m.groups() == (f"{b['phase_d']:.2f}", str(b["n_exp"]), f"{b['exp_s']:.0f}", f"{r['p16']:.0f}",
                                  f"{r['p84']:.0f}")
        m, rest = _cut(rest, r"a (\S+) sigma detection")
        assert float(m[1]) == st["sigma"]
        m, rest = _cut(rest, r"16-84% range is over (\d+) draws")
        assert int(m[1]) == st["draws"] == doc["ensemble"]["settings"]["draws"]
        measured = {}  # species -> observed trough wavelengths of the detected features (plan.json features)
        for b in blocks:
            o = next(o for o in _night(doc, b)["setups"] if o["setup"] == b["setup"])
            for f in o["features"]:
                if f["id"] in b["detected"] and f["measured_A"] is not None:
                    measured.setdefault(f["species"], set()).add(f"{f['measured_A']:.0f}")
        for m in list(re.finditer(r"([A-Z][a-z]? [IV]+) \(trough at (\d+)(?:-(\d+))? A\)", rest)):
            assert m[2] in measured[m[1]] and (m[3] is None or m[3] in measured[m[1]]), m[0]
        rest = re.sub(r"([A-Z][a-z]? [IV]+) \(trough at (\d+)(?:-(\d+))? A\)", " ", rest)
        m, rest = _cut(rest, r"at most (\d+)% of a trough")
        m, rest = _cut(rest, r"at >= (\S+) sigma in at least one")
        assert float(m[1]) == st["sigma"]
        m, rest = _cut(rest, r"Including (\d+) min of acquisition")
        assert int(m[1]) == round(st["overhead_s"] / 60)
        m, rest = _cut(rest, r"the request is (\d+\.\d) h \((\d+\.\d) h on source\) over (\d+) nights?")
        assert m[1] == f"{sum(map(_hours, blocks)):.1f}"
        assert m[2] == f"{sum(b['n_exp'] * b['exp_s'] for b in blocks) / 3600:.1f}"
        assert int(m[3]) == len(nights)
        # nothing numeric is left but ids (setup, telescope, site name) and the 16-84% label
        for word in [b["setup"] for b in blocks] + [tel, blocks[0]["target"], _site_name(doc, blocks[0]["site"])]:
            rest = rest.replace(word, " ")
        assert not re.findall(r"\d+", rest.replace("16-84%", "")), rest


def _site_name(doc, site):
    return next(s["name"] for s in doc["sites"] if s["id"] == site)


def test_time_request_is_per_telescope(demo):
    out, doc = demo
    md = (out / "report.md").read_text()
    section = md.split("### Time request per telescope", 1)[1].split("###", 1)[0]
    rows = [line.split(" | ") for line in section.splitlines() if line.startswith("| ") and "---" not in line][1:]
    by_tel = {}
    for b in doc["blocks"]:
        by_tel.setdefault(b["telescope"], []).append(b)
    assert [r[0].lstrip("| ") for r in rows] == list(dict.fromkeys(
        b["telescope"] for b in sorted(doc["blocks"], key=lambda b: b["start_utc"])))
    for r in rows:
        blocks = by_tel[r[0].lstrip("| ")]
        assert int(r[2]) == len({b["night"] for b in blocks})
        assert r[7].rstrip(" |") == f"{sum(map(_hours, blocks)):.2f}"  # hours include the overheads


def test_coordinates_are_sexagesimal_and_degrees(demo):
    from astropy.coordinates import Angle

    out, doc = demo
    md = (out / "report.md").read_text()
    ev = doc["event"]
    row = next(line for line in md.splitlines() if line.startswith(f"| {ev['id']} |"))
    _, hms, dms, ra, dec = [c.strip() for c in row.strip("| ").split("|")]
    # astropy Angle parses the sexagesimal text independently of how kncast wrote it
    assert Angle(hms, unit="hourangle").deg == pytest.approx(ev["ra_deg"], abs=1e-4)
    assert Angle(dms, unit="deg").deg == pytest.approx(ev["dec_deg"], abs=1e-4)
    assert float(ra) == pytest.approx(ev["ra_deg"], abs=5e-6) and float(dec) == pytest.approx(ev["dec_deg"], abs=5e-6)


def test_figures_have_descriptive_alt_text(demo):
    out, doc = demo
    html = (out / "report.html").read_text()
    alts = re.findall(r'<img alt="([^"]*)"', html)
    assert len(alts) == len(doc["files"]["figures"])
    assert all(len(a.split()) >= 5 for a in alts), alts  # a sentence, not a file name


# ------------------------------------------------------------------ hostile text from files
EVIL_ID = "kn <script>document.body.setAttribute('data-pwned', 'id')</script> & co"
EVIL_SITE = "Cerro <script>document.title = 'pwned'</script> & Sons"


@pytest.fixture(scope="module")
def hostile(tmp_path_factory):
    from kncast.planner.cli import main

    tmp = tmp_path_factory.mktemp("hostile")
    sites = tmp / "sites"
    sites.mkdir()
    text = (ROOT / "sites" / "paranal.toml").read_text()
    text = re.sub(r'^id = "paranal"', 'id = "evil-site"', text, count=1, flags=re.M)
    text = re.sub(r'^name = "[^"]*"', "name = " + json.dumps(EVIL_SITE), text, count=1, flags=re.M)
    (sites / "evil-site.toml").write_text(text)
    event = (ROOT / "demo_events" / "kn-demo-south.toml").read_text()
    event = re.sub(r'^id = "[^"]*"', "id = " + json.dumps(EVIL_ID), event, count=1, flags=re.M)
    (tmp / "evil.toml").write_text(event)
    out = tmp / "plan"
    args = ["plan", "--event", tmp / "evil.toml", "--sites-dir", sites, "--sites", "evil-site", "--nights", "2",
            "--draws", "20", "--out", out]
    assert main([str(a) for a in args]) == 0
    doc = json.loads((out / "plan.json").read_text())
    assert doc["event"]["id"] == EVIL_ID and doc["sites"][0]["name"] == EVIL_SITE
    return out


def test_hostile_text_is_escaped(hostile):
    html = (hostile / "report.html").read_text()
    md = (hostile / "report.md").read_text()
    assert "<script" not in html  # the template has no script of its own
    assert "kn &lt;script&gt;document.body.setAttribute(&#39;data-pwned&#39;, &#39;id&#39;)&lt;/script&gt; &amp; co" in html
    assert "Cerro &lt;script&gt;document.title = &#39;pwned&#39;&lt;/script&gt; &amp; Sons" in html
    assert "<script" not in md and "kn &lt;script>" in md and "Cerro &lt;script>" in md


@needs_chromium
def test_no_script_runs_and_the_text_shows_literally(hostile, tmp_path):
    r = _chromium(tmp_path, "--virtual-time-budget=5000", "--dump-dom", (hostile / "report.html").as_uri())
    dom = r.stdout
    assert "<h1>" in dom, r.stderr[-400:]
    assert "data-pwned" not in dom.split("<body", 1)[1].split(">", 1)[0]  # the body was not touched
    title = re.search(r"<title>(.*?)</title>", dom, re.S)[1]
    assert "pwned" not in title or "&lt;script&gt;" in title  # the title is the escaped id, not 'pwned'
    assert title != "pwned"
    # the serialised DOM holds the id as text: the browser re-escapes it as &lt; ... &amp;
    assert "kn &lt;script&gt;document.body.setAttribute('data-pwned', 'id')&lt;/script&gt; &amp; co" in dom
    assert "Cerro &lt;script&gt;document.title = 'pwned'&lt;/script&gt; &amp; Sons" in dom


# ------------------------------------------------------------------ 800 px
WIDTH_PROBE = ("<script>window.addEventListener('load', () => {const p = document.createElement('pre');"
               "p.id = 'kncast-width'; p.textContent = JSON.stringify({page: document.documentElement.scrollWidth,"
               " view: window.innerWidth, tables: document.querySelectorAll('.table-wrap table').length});"
               "document.body.appendChild(p);});</script>")


@needs_chromium
def test_page_does_not_scroll_sideways_at_800px(demo, tmp_path):
    out, _ = demo
    page = tmp_path / "probe.html"
    page.write_text((out / "report.html").read_text().replace("</body>", WIDTH_PROBE + "</body>"))
    r = _chromium(tmp_path, "--window-size=800,1200", "--virtual-time-budget=5000", "--dump-dom", page.as_uri())
    m = re.search(r'<pre id="kncast-width">(.*?)</pre>', r.stdout, re.S)
    assert m, r.stderr[-400:]
    w = json.loads(m[1].replace("&quot;", '"'))
    assert w["tables"] >= 5 and w["page"] <= w["view"], w  # wide tables scroll inside their own box
    assert CHROMIUM
