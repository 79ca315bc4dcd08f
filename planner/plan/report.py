"""The campaign report: ``report.md`` and a self-contained ``report.html``.

Both files are rendered from the same list of blocks built from the
``plan.json`` document (see docs/commands/plan.md, section "The report"), so they always say the same
thing.  The HTML embeds every figure as a base64 ``data:image/png`` URI and
carries its own small style sheet: it opens anywhere, offline, as one file.
"""
from __future__ import annotations

import base64
import html
import importlib
import re
from dataclasses import dataclass, field
from pathlib import Path

CAUTIONS = (
    "Sun avoidance: every telescope has its own Sun-avoidance and pointing limits; kncast only "
    "reports windows in the dark part of the night and does not know them. Never point near the "
    "Sun on the strength of a kncast window.",
    "Forecasts are model estimates: temperatures, magnitudes, line strengths, S/N and exposure times "
    "come from simplified physical models with uncertain inputs (distance, ejecta mass, opacity).",
    "The observatory's own exposure-time tools and operating rules take precedence over these numbers.",
)
CAUTION_LINE = ("Cautions: forecasts are model estimates; check Sun-avoidance limits; the observatory's "
                "own exposure-time tools and rules take precedence.")

# Modules whose models feed a plan; their docstrings (or a REFERENCES tuple) name the sources.
MODEL_MODULES = (
    ("Sky geometry (Sun, Moon, target)", "kncast.planner.visibility.sky"),
    ("Nights, twilight and observing windows", "kncast.planner.visibility.core"),
    ("Airmass", "kncast.forecast.airmass"),
    ("Photosphere", "kncast.forecast.photosphere"),
    ("Photosphere (radioactive heating)", "kncast.forecast.heating"),
    ("Blackbody", "kncast.forecast.blackbody"),
    ("Transient (distance, redshift, dust)", "kncast.forecast.source"),
    ("Distance and redshift", "kncast.forecast.distance"),
    ("Dust extinction", "kncast.forecast.extinction"),
    ("Synthetic magnitudes", "kncast.forecast.photometry"),
    ("Air/vacuum wavelengths", "kncast.forecast.airvac"),
    ("Line list", "kncast.forecast.linelist"),
    ("Feature windows (Doppler)", "kncast.forecast.doppler"),
    ("LTE ionization, excitation and Sobolev optical depth", "kncast.forecast.lte"),
    ("Line features", "kncast.forecast.features"),
    ("Coverage and verdicts", "kncast.forecast.coverage"),
    ("Telluric bands", "kncast.forecast.tellurics"),
    ("Atmospheric extinction", "kncast.forecast.extinction_atm"),
    ("Sky background and moonlight", "kncast.forecast.skybright"),
    ("Slit losses and seeing", "kncast.forecast.slit"),
    ("Detector noise (CCD equation)", "kncast.forecast.ccd"),
    ("Signal-to-noise and exposure time", "kncast.forecast.exposure"),
)

# An author-year citation: "Kasten & Young 1989", "Korobkin et al. (2012)", "Benn & Ellison 1998, ...".

_CITATION = re.compile(
    r"\b((?:[A-Z][A-Za-z'\-]+)(?:, [A-Z][A-Za-z'\-]+)*(?:,? (?:&|and) [A-Z][A-Za-z'\-]+| et al\.)?,? "
    r"\(?(?:19|20)\d{2}[a-z]?\)?"
    r"(?:,? (?:[A-Z][A-Za-z&.]+ ?)+\d+(?:(?:, ?| )\d+)?)?)"
)
_NOT_AUTHORS = {"January", "February", "March", "April", "May", "June", "July", "August", "September",
                "October", "November", "December", "The", "In", "See", "Since", "From", "Until", "Before",
                "After", "Version", "Table", "Figure", "Eq", "Equation", "Schema", "Python", "IAU",
                "DE", "WGS", "CODATA", "UTC", "TT", "MJD", "JD", "AB", "Vega", "IERS"}


@dataclass
class Block:
    """One piece of the report: a heading, paragraph, list, table or figure."""

    kind: str  # "h1" | "h2" | "h3" | "p" | "ul" | "table" | "img" | "note"
    text: str = ""
    items: list = field(default_factory=list)
    header: list = field(default_factory=list)
    path: str = ""
    row_classes: list = field(default_factory=list)  # HTML class per table row ("" for none)


# ----------------------------------------------------------------------------------- references
def collect_references(modules=MODEL_MODULES) -> list[dict]:
    """Citations found in the documentation of every model module kncast used.

    A module may define ``REFERENCES`` (a sequence of strings); otherwise the
    author-year citations in its docstring are taken.  Modules that are not
    installed are skipped.  Returns ``[{"model", "module", "reference"}]``.
    """
    out, seen = [], set()
    for model, name in modules:
        try:
            mod = importlib.import_module(name)
        except ImportError:
            continue
        refs = getattr(mod, "REFERENCES", None)
        found = [str(r) for r in refs] if refs else citations_in(mod.__doc__ or "")
        for ref in _longest(found):
            key = (model, _norm(ref))
            if key not in seen:
                seen.add(key)
                out.append({"model": model, "module": name, "reference": ref})
    return out


def data_references(tellurics=None, linelist=None) -> list[dict]:
    """Sources named in the provenance columns of the data files used (telluric bands, line list)."""
    out = []
    if tellurics is not None:
        text = " ; ".join(sorted(set(str(x) for x in tellurics.bands["source"])))
        out += [{"model": "Telluric bands", "module": "forecast/data/telluric_bands.ecsv", "reference": r}
                for r in _longest(citations_in(text))]
    if linelist is not None:
        out += [{"model": "Line list", "module": "forecast/data/lines.ecsv", "reference": r}
                for r in sorted(set(str(x) for x in linelist.source))]
    return out


def fullest_references(rows: list[dict]) -> list[dict]:
    """Each work once across all models: the fullest citation of it, first model that names it."""
    keep = set(_longest([r["reference"] for r in rows]))
    out, seen = [], set()
    for r in rows:
        key = _norm(r["reference"])
        if r["reference"] in keep and key not in seen:
            seen.add(key)
            out.append(r)
    return out


def _longest(refs: list[str]) -> list[str]:
    """Drop a citation that is the start of a fuller one ("Morton 2000" beside "Morton 2000, ApJS 130, 403")."""
    keys = [_norm(r) for r in refs]
    return [r for r, k in zip(refs, keys) if not any(o != k and o.startswith(k) for o in keys)]


def citations_in(text: str) -> list[str]:
    """Author-year citations in ``text`` (order kept, duplicates removed)."""
    text = " ".join(text.split())
    out, seen = [], set()
    for m in _CITATION.finditer(text):
        ref = m.group(1).strip(" ,;()").replace("(", "").replace(")", "")
        if ref.split()[0].rstrip(",") in _NOT_AUTHORS:
            continue
        if _norm(ref) not in seen:
            seen.add(_norm(ref))
            out.append(ref)
    return out


def _norm(ref: str) -> str:
    return re.sub(r"[^a-z0-9]", "", ref.lower())


# ----------------------------------------------------------------------------------- content
def _fmt(value, spec: str = ".1f", none: str = "-") -> str:
    if value is None:
        return none
    try:
        return format(value, spec)
    except (TypeError, ValueError):
        return str(value)


def _hm(iso: str | None) -> str:
    """'2027-03-14T23:10:00Z' -> '03-14 23:10'."""
    return f"{iso[5:10]} {iso[11:16]}" if iso else "-"


def _band_label(band: str) -> str:
    """'bessell-R' -> 'R', 'twomass-J' -> 'J' (speclite names: group-band)."""
    return band.split("-", 1)[-1]


def _exposure_words(choice: dict) -> str:
    n, t = choice.get("nexp"), choice.get("exposure_s")
    if n and t:
        return f"{n} x {t:.0f} s"
    return _fmt(choice.get("time_for_target_s"), ".0f") + " s"


def build_blocks(doc: dict, figures: list[dict]) -> list[Block]:
    """The report as blocks, from a plan document and its figures ``[{"title", "path", "caption"}]``."""
    ev, st, camp = doc["event"], doc["settings"], doc["campaign"]
    blocks = [Block("h1", f"Spectroscopy campaign plan for {ev['id']}")]
    blocks.append(Block("note", CAUTION_LINE))
    blocks += _summary(doc)
    blocks += _night_table(doc)
    blocks += _campaign(doc)
    blocks += _candidates(doc)
    if figures:
        blocks.append(Block("h2", "Figures"))
        for fig in figures:
            blocks.append(Block("img", fig["title"], path=fig["path"], items=[fig.get("caption", "")]))
    blocks += _justification(doc)
    blocks.append(Block("h2", "Cautions"))
    blocks.append(Block("ul", items=list(doc.get("cautions") or CAUTIONS)))
    blocks.append(Block("p", f"Generated by kncast {doc['kncast']} (plan schema {doc['schema']}); all numbers "
                             f"behind this report are in plan.json and the ECSV tables beside it."))
    del st, camp
    return blocks


def _summary(doc: dict) -> list[Block]:
    ev, st, camp = doc["event"], doc["settings"], doc["campaign"]
    dist = (f"{ev['distance_mpc']:g} Mpc" if ev.get("distance_mpc") else f"z = {ev.get('redshift')}")
    if ev.get("distance_err_mpc"):
        dist += f" +/- {ev['distance_err_mpc']:g} Mpc"
    lines = [
        f"Event {ev['id']} at RA {ev['ra_deg']:.4f} deg, Dec {ev['dec_deg']:+.4f} deg, t0 {ev['t0_utc']}, "
        f"distance {dist}, Milky Way E(B-V) {ev.get('ebv_mw', 0):.3f} mag.",
        f"Searched {len(doc['sites'])} site(s) over {st['nights']} night(s) after t0 ({st['twilight']} twilight), "
        f"aiming for S/N {st['snr_target']:g} per resolution element with at most {st['max_hours']:g} h per night "
        f"and {st['overhead_s'] / 60:.0f} min of acquisition and readout overhead.",
    ]
    last = camp.get("last_useful")
    n_useful = camp.get("useful_nights", 0)
    if n_useful:
        first = camp.get("first_useful")
        lines.append(f"{n_useful} site-night(s) can deliver a useful spectrum, from day {first['phase_d']:.2f} "
                     f"({first['site']}, night of {first['night']}) to day {last['phase_d']:.2f} "
                     f"({last['site']}, night of {last['night']}), the last useful night.")
    else:
        lines.append("Nothing useful can be done with these sites and settings: " + camp.get("why_nothing", "") )
    out = [Block("h2", "Summary")] + [Block("p", s) for s in lines]
    return out


def _moon_words(ep: dict) -> str:
    if ep["moon_altitude_deg"] is not None and ep["moon_altitude_deg"] <= 0:
        return "down"
    return f"{100 * ep['moon_illumination']:.0f}% at {ep['moon_sep_deg']:.0f} deg"


def _window_words(ep: dict) -> str:
    return f"{_hm(ep['window_start_utc'])} - {_hm(ep['window_end_utc'])[6:]}"


def _night_table(doc: dict) -> list[Block]:
    useful = sorted((n for n in doc["nights"] if n.get("choice")), key=lambda n: n["epoch"]["phase_d"])
    out = [Block("h2", "Recommended observations"),
           Block("p", "Every site and night where a setup reaches the target S/N, in order of epoch (days since t0 "
                      "at the middle of the observing block). Exposure: the time for the target S/N at the "
                      "reference feature's trough; S/N in window: what the whole usable window would give there.")]
    if useful:
        rows = [[f"{n['epoch']['phase_d']:.2f}", n["site"], n["night"], _window_words(n["epoch"]),
                 f"{n['epoch']['airmass']:.2f}", _moon_words(n["epoch"]), n["choice"]["setup"],
                 f"{n['choice']['feature']} ({n['choice']['trough_obs_A']:.0f} A)", _exposure_words(n["choice"]),
                 _fmt(n["choice"]["snr"], ".1f")] for n in useful]
        out.append(Block("table", header=["Day", "Site", "Night", "Window (UTC)", "Airmass", "Moon", "Setup",
                                          "Feature (trough)", "Exposure", "S/N in window"], items=rows))
    else:
        out.append(Block("p", "None: no site and night reaches the target S/N at a clear strong feature."))
    rows = []
    for n in doc["nights"]:
        ep, ch = n.get("epoch"), n.get("choice")
        rows.append([n["site"], n["night"], _fmt(ep and ep["phase_d"], ".2f"), _window_words(ep) if ep else "-",
                     _fmt(ep and ep["airmass"], ".2f"), ch["setup"] if ch else "-",
                     _exposure_words(ch) if ch else "-", _fmt(ch and ch["snr"], ".1f"), n["reason"]])
    out += [Block("h2", "Night by night"),
            Block("p", "Every site and night with the choice and the reason in words."),
            Block("table", header=["Site", "Night", "Day", "Window (UTC)", "Airmass", "Setup", "Exposure",
                                   "S/N in window", "Reason"], items=rows,
                  row_classes=["useful" if n.get("choice") else "" for n in doc["nights"]])]
    return out


def _campaign(doc: dict) -> list[Block]:
    camp = doc["campaign"]
    out = [Block("h2", "Across the campaign")]
    rows = [[s["site"], ", ".join(f"{d:.2f}" for d in s["useful_phases_d"]) or "none",
             s["last_useful_night"] or "-"] for s in camp["sites"]]
    out.append(Block("table", header=["Site", "Useful epochs (days since t0)", "Last useful night"], items=rows))
    rows = [[s["setup"], _fmt(s["last_reaches_target_phase_d"], ".2f"), _fmt(s["too_faint_from_phase_d"], ".2f"),
             s["note"]] for s in camp["setups"]]
    if rows:
        out.append(Block("p", "When each setup stops reaching the target S/N even with the full usable window "
                              "(the source is too faint for it from that epoch on):"))
        out.append(Block("table", header=["Setup", "Last epoch reaching target (d)", "Too faint from (d)", "In words"],
                         items=rows))
    return out


def _candidates(doc: dict) -> list[Block]:
    """Several candidate positions ranked per site and night (most observable hours, then airmass)."""
    nights = [n for n in doc.get("candidates") or [] if any(c["hours"] > 0 for c in n["candidates"])]
    if not nights:
        return []
    rows = [[n["site"], n["night"], " > ".join(f"{c['id']} ({c['hours']:.1f} h)" for c in n["candidates"]
                                            if c["hours"] > 0)] for n in nights]
    return [Block("h2", "Candidates ranked per site and night"),
            Block("p", "Observe in this order: most observable hours first, then the best airmass. Candidates "
                       "without a window that night are left out."),
            Block("table", header=["Site", "Night", "Order (observable hours)"], items=rows)]


def _justification(doc: dict) -> list[Block]:
    ev, st = doc["event"], doc["settings"]
    out = [Block("h2", "Technical justification"),
           Block("p", "Ready to adapt for a target-of-opportunity proposal; every value is a model estimate.")]
    out.append(Block("h3", "Targets"))
    targets = ev.get("candidates") or [{"id": ev["id"], "ra_deg": ev["ra_deg"], "dec_deg": ev["dec_deg"]}]
    out.append(Block("table", header=["Target", "RA (deg)", "Dec (deg)"],
                     items=[[t["id"], f"{t['ra_deg']:.5f}", f"{t['dec_deg']:+.5f}"] for t in targets]))
    if len(targets) > 1:
        out.append(Block("p", f"Windows and exposures are planned for {st.get('target', targets[0]['id'])}, the "
                              f"first listed candidate; the others lie within the localisation."))
    out.append(Block("h3", "Epochs, setups, exposure times and S/N"))
    rows = []
    for n in sorted((n for n in doc["nights"] if n.get("choice")), key=lambda n: n["epoch"]["phase_d"]):
        ch, ep = n["choice"], n["epoch"]
        ph = ep["photosphere"]
        mags = ph.get("mag_ab") or {}
        bands = st.get("mag_bands") or list(mags)
        rows.append([n["site"], n["night"], f"{ep['phase_d']:.2f}", ch["setup"], _fmt(ph.get("temperature_K"), ".0f"),
                     " / ".join(_fmt(mags.get(b), ".1f") for b in bands),
                     ch["feature"] or "-", _fmt(ch["trough_obs_A"], ".0f"), _exposure_words(ch),
                     f"{st['snr_target']:g}", _fmt(ch["snr"], ".1f"), _fmt(ep["airmass"], ".2f")])
    if rows:
        out.append(Block("table", header=["Site", "Night", "Day", "Setup", "T (K)", "AB mag " + " / ".join(_band_label(b) for b in st.get("mag_bands") or ()), "Feature",
                                          "Trough (A)", "Exposure", "Target S/N", "S/N in window", "Airmass"],
                         items=rows))
        chosen = [n for n in doc["nights"] if n.get("choice")]
        on_source = sum(n["choice"]["time_for_target_s"] or 0.0 for n in chosen) / 3600.0
        total = on_source + len(chosen) * st["overhead_s"] / 3600.0
        out.append(Block("p", f"Time request if every recommended observation is taken: {len(chosen)} "
                              f"observation(s), {on_source:.1f} h on source plus {st['overhead_s'] / 60:.0f} min "
                              f"overhead each, {total:.1f} h in all (S/N {st['snr_target']:g} per resolution "
                              f"element at the reference feature)."))
    else:
        out.append(Block("p", "No night reaches the target S/N at a clear strong feature."))
    out.append(Block("h3", "Assumptions"))
    out.append(Block("ul", items=list(doc.get("assumptions", []))))
    out.append(Block("h3", "References"))
    refs = doc.get("references", [])
    out.append(Block("ul", items=[f"{r['model']}: {r['reference']}" for r in refs] or ["(none found)"]))
    return out


# ----------------------------------------------------------------------------------- rendering
def _md_cell(text) -> str:
    return str(text).replace("|", "\\|").replace("\n", " ")


def render_markdown(blocks: list[Block]) -> str:
    """Markdown text; figures are linked by their relative paths."""
    parts = []
    for b in blocks:
        if b.kind in ("h1", "h2", "h3"):
            parts.append("#" * int(b.kind[1]) + " " + b.text)
        elif b.kind == "p":
            parts.append(b.text)
        elif b.kind == "note":
            parts.append("> " + b.text)
        elif b.kind == "ul":
            parts.append("\n".join(f"* {item}" for item in b.items))
        elif b.kind == "table":
            lines = ["| " + " | ".join(map(_md_cell, b.header)) + " |", "|" + "---|" * len(b.header)]
            lines += ["| " + " | ".join(map(_md_cell, row)) + " |" for row in b.items]
            parts.append("\n".join(lines))
        elif b.kind == "img":
            caption = b.items[0] if b.items else ""
            parts.append(f"![{b.text}]({b.path})" + (f"\n\n*{caption}*" if caption else ""))
    return "\n\n".join(parts) + "\n"


_CSS = """
:root { --ink: #1d2433; --muted: #5b6478; --rule: #d8dce6; --band: #f3f5f9; --accent: #2f5d8a; }
* { box-sizing: border-box; }
body { font: 15px/1.5 system-ui, -apple-system, "Segoe UI", sans-serif; color: var(--ink);
       max-width: 1100px; margin: 2rem auto; padding: 0 1.2rem; }
h1 { font-size: 1.6rem; margin-bottom: .4rem; }
h2 { font-size: 1.25rem; margin-top: 2.2rem; padding-bottom: .2rem; border-bottom: 2px solid var(--accent); }
h3 { font-size: 1.05rem; margin-top: 1.4rem; color: var(--accent); }
p.note { background: #fff6e0; border-left: 4px solid #d9a400; padding: .5rem .8rem; }
table { border-collapse: collapse; width: 100%; margin: .6rem 0 1rem; font-size: .86rem; }
th, td { border-bottom: 1px solid var(--rule); padding: .3rem .45rem; text-align: left; vertical-align: top; }
th { background: var(--band); font-weight: 600; }
tr:nth-child(even) td { background: #fafbfd; }
figure { margin: 1.2rem 0; }
figure img { max-width: 100%; height: auto; border: 1px solid var(--rule); }
figcaption { color: var(--muted); font-size: .85rem; }
footer, .muted { color: var(--muted); font-size: .85rem; }
nav.toc { font-size: .9rem; margin: .2rem 0 1rem; }
nav.toc a { color: var(--accent); text-decoration: none; }
td.n { white-space: nowrap; }
tr.useful td { background: #eef6ee; }
tr.useful td:first-child { border-left: 3px solid #3b7d4f; }
"""


def render_html(blocks: list[Block], folder: Path, title: str) -> str:
    """Self-contained HTML: figures read from ``folder`` and embedded as data URIs."""
    esc = html.escape
    parts = ["<!DOCTYPE html>", '<html lang="en">', "<head>", '<meta charset="utf-8">',
             '<meta name="viewport" content="width=device-width, initial-scale=1">',
             f"<title>{esc(title)}</title>", f"<style>{_CSS}</style>", "</head>", "<body>"]
    sections = [b.text for b in blocks if b.kind == "h2"]
    for b in blocks:
        if b.kind == "h1":
            parts.append(f"<h1>{esc(b.text)}</h1>")
            parts.append('<nav class="toc">' + " &middot; ".join(
                f'<a href="#{_anchor(t)}">{esc(t)}</a>' for t in sections) + "</nav>")
        elif b.kind == "h2":
            parts.append(f'<h2 id="{_anchor(b.text)}">{esc(b.text)}</h2>')
        elif b.kind == "h3":
            parts.append(f"<h3>{esc(b.text)}</h3>")
        elif b.kind == "p":
            parts.append(f"<p>{esc(b.text)}</p>")
        elif b.kind == "note":
            parts.append(f'<p class="note">{esc(b.text)}</p>')
        elif b.kind == "ul":
            parts.append("<ul>" + "".join(f"<li>{esc(str(i))}</li>" for i in b.items) + "</ul>")
        elif b.kind == "table":
            head = "".join(f"<th>{esc(str(h))}</th>" for h in b.header)
            classes = b.row_classes or [""] * len(b.items)
            body = "".join((f'<tr class="{k}">' if k else "<tr>") + "".join(_cell(c) for c in row) + "</tr>"
                           for row, k in zip(b.items, classes))
            parts.append(f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>")
        elif b.kind == "img":
            data = base64.b64encode((folder / b.path).read_bytes()).decode("ascii")
            caption = esc(b.items[0]) if b.items and b.items[0] else esc(b.text)
            parts.append(f'<figure><img alt="{esc(b.text)}" src="data:image/png;base64,{data}">'
                         f"<figcaption><strong>{esc(b.text)}.</strong> {caption}</figcaption></figure>")
    parts += ["</body>", "</html>"]
    return "\n".join(parts) + "\n"


def _cell(value) -> str:
    """A table cell; short values (dates, numbers, times) are kept on one line."""
    text = str(value)
    return f'<td class="n">{html.escape(text)}</td>' if len(text) <= 14 else f"<td>{html.escape(text)}</td>"


def _anchor(text: str) -> str:
    return re.sub(r"[^a-z0-9]+", "-", text.lower()).strip("-")


def write_report(folder, doc: dict, figures: list[dict]) -> tuple[Path, Path]:
    """Write ``report.md`` and ``report.html`` into ``folder``; returns their paths.

    ``figures`` lists PNG files relative to ``folder``: ``[{"title", "path", "caption"}]``.
    """
    from kncast.planner.output import atomic_path

    folder = Path(folder)
    blocks = build_blocks(doc, figures)
    md, page = folder / "report.md", folder / "report.html"
    with atomic_path(md) as tmp:
        tmp.write_text(render_markdown(blocks), encoding="utf-8")
    with atomic_path(page) as tmp:
        tmp.write_text(render_html(blocks, folder, f"kncast plan: {doc['event']['id']}"), encoding="utf-8")
    return md, page
