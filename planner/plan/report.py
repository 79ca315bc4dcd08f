"""The campaign report: ``report.md`` and a self-contained ``report.html``.

Both files are rendered by jinja2 templates (``templates/report.md.j2``, ``templates/report.html.j2``)
from one context built from the ``plan.json`` document (:func:`report_context`; see
docs/commands/plan.md, section "The report"), so they always say the same thing.  The HTML template is
autoescaped; in the Markdown one every value passes :func:`_md_text`, so text from files (ids, names)
is shown, never interpreted.  The HTML embeds every figure as a base64 ``data:image/png`` URI and
carries its own small style sheet: it opens anywhere, offline, as one file.

:class:`Block`, :func:`render_markdown` and :func:`render_html` render a plain list of blocks (the
semester report uses them).
"""
from __future__ import annotations

import base64
import functools
import html
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


@dataclass
class Block:
    """One piece of the report: a heading, paragraph, list, table or figure."""

    kind: str  # "h1" | "h2" | "h3" | "p" | "ul" | "table" | "img" | "note"
    text: str = ""
    items: list = field(default_factory=list)
    header: list = field(default_factory=list)
    path: str = ""
    row_classes: list = field(default_factory=list)  # HTML class per table row ("" for none)


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
    return _fmt(choice.get("time_to_sigma_s"), ".0f") + " s"


def _feature_cell(choice: dict) -> str:
    """'ba2-red (5158 A, visible)' or, for a classification spectrum, its continuum S/N."""
    if choice.get("feature") is None or choice.get("trough_obs_A") is None:
        return f"classification (continuum S/N {_fmt(choice.get('snr_at'), '.0f')})"
    return f"{choice['feature']} ({choice['trough_obs_A']:.0f} A, {choice.get('arm') or '-'})"


def _sigma_words(choice: dict | None) -> str:
    return "-" if not choice else _fmt(choice.get("significance"), ".1f")


def _summary_lines(doc: dict) -> list[str]:
    ev, st, camp = doc["event"], doc["settings"], doc["campaign"]
    dist = (f"{ev['distance_mpc']:g} Mpc" if ev.get("distance_mpc") else f"z = {ev.get('redshift')}")
    if ev.get("distance_err_mpc"):
        dist += f" +/- {ev['distance_err_mpc']:g} Mpc"
    lines = [
        f"Event {ev['id']} at RA {ev['ra_deg']:.4f} deg, Dec {ev['dec_deg']:+.4f} deg, t0 {ev['t0_utc']}, "
        f"distance {dist}, Milky Way E(B-V) {ev.get('ebv_mw', 0):.3f} mag.",
        f"Searched {len(doc['sites'])} site(s) over {st['nights']} night(s) after t0 ({st['twilight']} twilight), "
        f"aiming to detect diagnostic features at {st['sigma']:g} sigma (continuum S/N per {st['bin_kms']:g} km/s "
        f"bin at each trough) with at most {st['max_hours']:g} h per night and {st['overhead_s'] / 60:.0f} min of "
        f"acquisition and readout overhead.",
        f"Rule: {st['score']}.",
    ]
    last = camp.get("last_useful")
    n_useful = camp.get("useful_nights", 0)
    if n_useful:
        first = camp.get("first_useful")
        lines.append(f"{n_useful} site-night(s) can deliver a useful spectrum, from day {first['phase_d']:.2f} "
                     f"({first['site']}, night of {first['night']}) to day {last['phase_d']:.2f} "
                     f"({last['site']}, night of {last['night']}), the last useful night.")
    else:
        lines.append("Nothing useful can be done with these sites and settings: " + camp.get("why_nothing", ""))
    return lines


def _median(values: list[float]) -> float:
    v = sorted(values)
    return v[len(v) // 2] if len(v) % 2 else 0.5 * (v[len(v) // 2 - 1] + v[len(v) // 2])


def _ask(req: dict) -> dict:
    """One row of the summary: what to ask one telescope for."""
    blocks = req["blocks"]
    per_epoch = [b["n_exp"] * b["exp_s"] for b in blocks]
    return {"telescope": req["telescope"], "site": req["site_name"], "setups": ", ".join(req["setups"]),
            "nights": f"{len(req['nights'])} ({req['nights'][0]} to {req['nights'][-1]})"
            if len(req["nights"]) > 1 else f"1 ({req['nights'][0]})",
            "epochs": ", ".join(f"{p:.2f}" for p in req["phases_d"]),
            "per_epoch": f"{_median(per_epoch) / 60:.1f} min (median; range {min(per_epoch) / 60:.1f}-"
                         f"{max(per_epoch) / 60:.1f} min)",
            "total_h": f"{req['total_h']:.1f}"}


def _time_row(req: dict) -> list[str]:
    return [req["telescope"], req["site_name"], str(len(req["nights"])), ", ".join(req["nights"]),
            str(len(req["blocks"])), f"{req['on_source_h']:.2f}", f"{req['overhead_h']:.2f}", f"{req['total_h']:.2f}"]


def _alt_text(fig: dict) -> str:
    """Alt text: what the figure shows, in words (its title and caption)."""
    caption = (fig.get("caption") or "").strip()
    if not caption:
        return f"{fig['title']} (figure of the plan)"
    first = caption.split(". ")[0].rstrip(".")
    if len(first) > ALT_CHARS:
        first = first[:ALT_CHARS].rsplit(" ", 1)[0] + " ..."
    return f"{fig['title']}: {first}."


ALT_CHARS = 240  # alt text: the title and the caption's first sentence, cut at a word near this length


def report_context(doc: dict, figures: list[dict], folder: Path | None = None) -> dict:
    """Everything the report templates show, from a plan document and its figures
    ``[{"title", "path", "caption"}]``; with ``folder``, each figure's PNG as a data URI (report.html).

    One context for report.md and report.html: both say the same thing."""
    from kncast.planner.plan.proposal import justification_paragraph, target_rows, telescope_requests

    ev, st = doc["event"], doc["settings"]
    requests = telescope_requests(doc)
    targets = target_rows(doc)
    figs = []
    for f in figures:
        data = ""
        if folder is not None:
            data = "data:image/png;base64," + base64.b64encode((Path(folder) / f["path"]).read_bytes()).decode("ascii")
        figs.append({"title": f["title"], "path": f["path"], "caption": f.get("caption", ""), "alt": _alt_text(f),
                     "data": data})
    ctx = {
        "title": f"Spectroscopy campaign plan for {ev['id']}", "page_title": f"kncast plan: {ev['id']}",
        "caution_line": CAUTION_LINE, "summary": _summary_lines(doc), "asks": [_ask(r) for r in requests],
        "changes": _changes(doc), "anchoring": _anchoring(doc), "observations": _recommended(doc), "nights": _night_by_night(doc),
        "campaign": _campaign(doc), "candidates": _candidates(doc), "figures": figs,
        "justification": [{"telescope": r["telescope"], "site": r["site_name"],
                           "paragraph": justification_paragraph(doc, r)} for r in requests],
        "time_header": ["Telescope", "Site", "Nights", "Dates", "Epochs", "On source (h)", "Overheads (h)",
                        "Total (h)"],
        "time_rows": [_time_row(r) for r in requests], "overhead_min": f"{st['overhead_s'] / 60:.0f}",
        "targets": targets, "target_note": (f"Windows and exposures are planned for {st.get('target', targets[0]['id'])},"
                                            f" the first listed candidate; the others lie within the localisation."
                                            if len(targets) > 1 else ""),
        "epochs": _epoch_table(doc), "assumptions": list(doc.get("assumptions", [])),
        "references": [f"{r['model']}: {r['reference']}" for r in doc.get("references", [])],
        "cautions": list(doc.get("cautions") or CAUTIONS),
        "footer": f"Generated by kncast {doc['kncast']} (plan schema {doc['schema']}); all numbers behind this "
                  f"report are in plan.json and the ECSV tables beside it.",
    }
    ctx["sections"] = [t for t, on in (
        ("Summary", True), ("What changed", ctx["changes"]), ("Model against the measured photometry", ctx["anchoring"]),
        ("Recommended observations", True), ("Night by night", True), ("Across the campaign", True),
        ("Candidates ranked per site and night", ctx["candidates"]), ("Figures", figs),
        ("Technical justification", True), ("Cautions", True)) if on]
    return ctx


def _anchoring(doc: dict) -> list[Block]:
    """The model rescaled to measured photometry: the scales and the model against each anchor."""
    fit = (doc.get("model") or {}).get("anchoring")
    if not fit:
        return []
    words = (f"The photosphere model was rescaled to {fit['n_anchors']} measured AB magnitude(s) before planning: "
             f"luminosity x {fit['luminosity_scale']:.3g} ({fit['delta_mag']:+.2f} mag)"
             + (f", temperature x {fit['temperature_scale']:.3f}" if fit["temperature_fitted"] else "")
             + f"; rms residual {fit['rms_mag']:.2f} mag (least squares; docs/methods.md).")
    rows = [[a["band"], f"{a['phase_d']:.2f}", f"{a['mag_ab']:.2f}", f"{a['prior_mag_ab']:.2f}",
             f"{a['model_mag_ab']:.2f}", f"{a['residual_mag']:+.2f}"] for a in fit["anchors"]]
    return [Block("p", words),
            Block("table", header=["Band", "Day", "Measured (AB)", "Model before", "Model after", "Residual"],
                  items=rows)]


def _changes(doc: dict) -> list[Block]:
    """What this re-plan changed against the previous plan in the same folder (plan.previous.json)."""
    ch = doc.get("changes")
    if not ch:
        return []
    items = [f"gained: {c['site']}, night of {c['night']}" for c in ch["gained"]]
    items += [f"lost: {c['site']}, night of {c['night']}" for c in ch["lost"]]
    items += [f"{c['site']}, night of {c['night']}: {c['before']} -> {c['now']}" for c in ch["setup_changed"]]
    items += [f"{c['telescope']}, night of {c['night']}: {c['before']} -> {c['now']}" for c in ch["exposure_changed"]]
    return [Block("p", ch["summary"] + ".")] + ([Block("ul", items=items)] if items else [])


def _moon_words(ep: dict) -> str:
    if ep["moon_altitude_deg"] is not None and ep["moon_altitude_deg"] <= 0:
        return "down"
    return f"{100 * ep['moon_illumination']:.0f}% at {ep['moon_sep_deg']:.0f} deg"


def _window_words(ep: dict) -> str:
    return f"{_hm(ep['window_start_utc'])} - {_hm(ep['window_end_utc'])[6:]}"


def _recommended(doc: dict) -> list[Block]:
    useful = sorted((n for n in doc["nights"] if n.get("choice")), key=lambda n: n["epoch"]["phase_d"])
    out = [Block("p", "Every site and night where a setup detects a diagnostic feature at the target significance, "
                      "in order of epoch (days since t0 at the middle of the observing block). Exposure: the time "
                      "for the target significance on the best-measured trough; sigma in window: what the whole "
                      "usable window gives there.")]
    if useful:
        rows = [[f"{n['epoch']['phase_d']:.2f}", n["site"], n["night"], _window_words(n["epoch"]),
                 f"{n['epoch']['airmass']:.2f}", _moon_words(n["epoch"]), n["choice"]["setup"],
                 _feature_cell(n["choice"]),
                 _exposure_words(n["choice"]), _sigma_words(n["choice"]), ", ".join(n["detected"])] for n in useful]
        out.append(Block("table", header=["Day", "Site", "Night", "Window (UTC)", "Airmass", "Moon", "Setup",
                                          "Feature (trough, arm)", "Exposure", "Sigma in window", "Detected"],
                         items=rows))
    else:
        out.append(Block("p", "None: no site and night detects a diagnostic feature at the target significance."))
    return out


def _night_by_night(doc: dict) -> list[Block]:
    rows = []
    for n in doc["nights"]:
        ep, ch = n.get("epoch"), n.get("choice")
        rows.append([n["site"], n["night"], _fmt(ep and ep["phase_d"], ".2f"), _window_words(ep) if ep else "-",
                     _fmt(ep and ep["airmass"], ".2f"), ch["setup"] if ch else "-",
                     _exposure_words(ch) if ch else "-", _sigma_words(ch), n["reason"]])
    return [Block("p", "Every site and night with the choice and the reason in words."),
            Block("table", header=["Site", "Night", "Day", "Window (UTC)", "Airmass", "Setup", "Exposure",
                                   "Sigma in window", "Reason"], items=rows,
                  row_classes=["useful" if n.get("choice") else "" for n in doc["nights"]])]


def _campaign(doc: dict) -> list[Block]:
    camp = doc["campaign"]
    out = []
    rows = [[s["site"], ", ".join(f"{d:.2f}" for d in s["useful_phases_d"]) or "none",
             s["last_useful_night"] or "-"] for s in camp["sites"]]
    out.append(Block("table", header=["Site", "Useful epochs (days since t0)", "Last useful night"], items=rows))
    rows = [[s["setup"], _fmt(s["last_reaches_target_phase_d"], ".2f"), _fmt(s["too_faint_from_phase_d"], ".2f"),
             s["note"]] for s in camp["setups"]]
    if rows:
        out.append(Block("p", "When each setup stops detecting any diagnostic feature at the target significance "
                              "even with the full usable window (the source is too faint for it from that epoch on):"))
        out.append(Block("table", header=["Setup", "Last epoch detecting (d)", "Detects nothing from (d)", "In words"],
                         items=rows))
    return out


def _candidates(doc: dict) -> list[Block]:
    """Several candidate positions ranked per site and night (most observable hours, then airmass)."""
    nights = [n for n in doc.get("candidates") or [] if any(c["hours"] > 0 for c in n["candidates"])]
    if not nights:
        return []
    rows = [[n["site"], n["night"], " > ".join(f"{c['id']} ({c['hours']:.1f} h)" for c in n["candidates"]
                                            if c["hours"] > 0)] for n in nights]
    return [Block("p", "Observe in this order: most observable hours first, then the best airmass. Candidates "
                       "without a window that night are left out."),
            Block("table", header=["Site", "Night", "Order (observable hours)"], items=rows)]


def _epoch_table(doc: dict) -> list[Block]:
    """Epochs, setups, exposure times and S/N of every recommended observation."""
    st = doc["settings"]
    rows = []
    for n in sorted((n for n in doc["nights"] if n.get("choice")), key=lambda n: n["epoch"]["phase_d"]):
        ch, ep = n["choice"], n["epoch"]
        ph = ep["photosphere"]
        mags = ph.get("mag_ab") or {}
        bands = st.get("mag_bands") or list(mags)
        rows.append([n["site"], n["night"], f"{ep['phase_d']:.2f}", ch["setup"], _fmt(ph.get("temperature_K"), ".0f"),
                     " / ".join(_fmt(mags.get(b), ".1f") for b in bands),
                     ch["feature"] or "-", _fmt(ch["trough_obs_A"], ".0f"), _exposure_words(ch),
                     f"{st['sigma']:g}", _sigma_words(ch), _fmt(ep["airmass"], ".2f")])
    if not rows:
        return [Block("p", "No night detects a diagnostic feature at the target significance.")]
    mag_head = "AB mag " + " / ".join(_band_label(b) for b in st.get("mag_bands") or ())
    return [Block("table", header=["Site", "Night", "Day", "Setup", "T (K)", mag_head, "Feature", "Trough (A)",
                                   "Exposure", "Target sigma", "Sigma in window", "Airmass"], items=rows)]


# ----------------------------------------------------------------------------------- rendering
# "<" opening a tag, comment or declaration, "&" opening a character reference: shown literally in Markdown
_MD_HTML = re.compile(r"<(?=[A-Za-z/!?])|&(?=#?[A-Za-z0-9]+;)")


def _md_text(text) -> str:
    """Text from the plan (ids and names come from files) with raw HTML neutralised for Markdown viewers."""
    return _MD_HTML.sub(lambda m: "&lt;" if m.group() == "<" else "&amp;", str(text))


def _md_cell(text) -> str:
    return _md_text(text).replace("|", "\\|").replace("\n", " ")


def render_markdown(blocks: list[Block]) -> str:
    """Markdown text; figures are linked by their relative paths.  Raw HTML in the text (an id from a
    file, say) is escaped, so a Markdown viewer shows it as text."""
    parts = []
    for b in map(_md_block, blocks):
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


def _md_block(b: Block) -> Block:
    """A copy of ``b`` with its text, list items and figure caption escaped (table cells: _md_cell)."""
    items = b.items if b.kind == "table" else [_md_text(i) for i in b.items]
    return Block(b.kind, _md_text(b.text), items, b.header, b.path, b.row_classes)


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


class _MdSafe(str):
    """Markdown text already escaped (a table cell): the template's finalize leaves it alone."""


def _md_finalize(value):
    if value is None:
        return ""
    return value if isinstance(value, _MdSafe) else _md_text(value)


TEMPLATES = Path(__file__).parent / "templates"  # report.md.j2, report.html.j2 and their blocks (package data)
_TABLE_CSS = """
.table-wrap { max-width: 100%; overflow-x: auto; margin: .6rem 0 1rem; }
.table-wrap table { margin: 0; }
span.n { white-space: nowrap; }
p.justification { background: var(--band); border-left: 4px solid var(--accent); padding: .6rem .9rem; }
"""


@functools.lru_cache(maxsize=2)
def _environment(kind: str):
    """The jinja2 environment of report.md (Markdown escaping on every value) or report.html (autoescape)."""
    import jinja2

    loader = jinja2.FileSystemLoader(str(TEMPLATES))
    opts = dict(loader=loader, trim_blocks=True, lstrip_blocks=True, keep_trailing_newline=True,
                undefined=jinja2.StrictUndefined)
    if kind == "html":
        env = jinja2.Environment(autoescape=True, **opts)
        env.filters["anchor"] = _anchor
    else:
        env = jinja2.Environment(autoescape=False, finalize=_md_finalize, **opts)
        env.filters["cell"] = lambda v: _MdSafe(_md_cell(v))
    return env


def render_report_markdown(ctx: dict) -> str:
    """report.md from the report context (:func:`report_context`)."""
    text = _environment("md").get_template("report.md.j2").render(ctx)
    text = re.sub(r"[ \t]+\n", "\n", text)
    return re.sub(r"\n{3,}", "\n\n", text).strip() + "\n"


def render_report_html(ctx: dict) -> str:
    """report.html (self-contained: figures as data URIs) from the report context."""
    from markupsafe import Markup

    text = _environment("html").get_template("report.html.j2").render(ctx, css=Markup(_CSS + _TABLE_CSS))
    return re.sub(r"\n{3,}", "\n\n", text)


def write_report(folder, doc: dict, figures: list[dict]) -> tuple[Path, Path]:
    """Write ``report.md`` and ``report.html`` into ``folder``; returns their paths.

    ``figures`` lists PNG files relative to ``folder``: ``[{"title", "path", "caption"}]``.
    """
    from kncast.planner.output import atomic_path

    folder = Path(folder)
    ctx = report_context(doc, figures, folder)
    md, page = folder / "report.md", folder / "report.html"
    with atomic_path(md) as tmp:
        tmp.write_text(render_report_markdown(ctx), encoding="utf-8")
    with atomic_path(page) as tmp:
        tmp.write_text(render_report_html(ctx), encoding="utf-8")
    return md, page
