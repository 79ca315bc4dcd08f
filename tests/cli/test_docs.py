"""The documentation holds together: links resolve, every option is on its command's page, the README stays short.

The pages are kncast's own (README.md, DEVELOPERS.md, docs/**/*.md); the option lists are read from the live
parser (``kncast.planner.cli.build_parser``), so an option added to a command must be documented on its page.
Anchors follow GitHub's heading slugs (common practice: lower case, punctuation dropped, spaces to hyphens,
``-1``, ``-2`` ... for repeated headings).
"""
from __future__ import annotations

import argparse
import re
from pathlib import Path
from urllib.parse import unquote

import pytest

from kncast.planner.cli import build_parser

ROOT = Path(__file__).resolve().parents[2]
DOCS = ROOT / "docs"
COMMAND_PAGES = DOCS / "commands"
README_MAX_BYTES = 15_500
NOT_DOCUMENTED = {"--help"}          # argparse's own; every page links to `kncast COMMAND --help` instead

FENCE = re.compile(r"^ {0,3}(```|~~~)")
INLINE_CODE = re.compile(r"(`+)(.+?)\1")
LINK = re.compile(r"!?\[(?:[^\[\]]|\[[^\]]*\])*\]\(\s*<?([^)\s>]+)>?(?:\s+\"[^\"]*\")?\s*\)")
HEADING = re.compile(r"^ {0,3}(#{1,6})\s+(.*?)\s*#*\s*$")


def markdown_files() -> list[Path]:
    files = [ROOT / "README.md", ROOT / "DEVELOPERS.md", *sorted(DOCS.glob("**/*.md"))]
    return [f for f in files if f.exists()]


def prose_lines(text: str):
    """Lines outside fenced code blocks, with inline code removed (links in code are not links)."""
    fenced = False
    for line in text.splitlines():
        if FENCE.match(line):
            fenced = not fenced
            continue
        if not fenced and not line.startswith("    "):
            yield line


def slug(heading: str) -> str:
    """GitHub's anchor for a heading text: markup dropped, lower case, punctuation dropped, spaces -> '-'."""
    text = re.sub(r"\[([^\]]*)\]\([^)]*\)", r"\1", heading)      # [text](url) -> text
    text = text.replace("`", "").replace("*", "")
    text = text.strip().lower()
    text = re.sub(r"[^\w\- ]", "", text)
    return text.replace(" ", "-")


def anchors(path: Path) -> set[str]:
    seen: dict[str, int] = {}
    out = set()
    for line in prose_lines(path.read_text(encoding="utf-8")):
        m = HEADING.match(line)
        if not m:
            continue
        base = slug(m.group(2))
        n = seen.get(base, 0)
        seen[base] = n + 1
        out.add(base if n == 0 else f"{base}-{n}")
    return out


def relative_links(path: Path):
    for line in prose_lines(path.read_text(encoding="utf-8")):
        for target in LINK.findall(INLINE_CODE.sub("", line)):
            if re.match(r"^[a-z][a-z0-9+.-]*:", target, re.I):      # http:, https:, mailto: ...
                continue
            yield target


def test_slug_follows_github_rules():
    # GitHub heading anchors (common practice, as rendered on github.com)
    assert slug("Quick start") == "quick-start"
    assert slug("Exposure times and S/N") == "exposure-times-and-sn"
    assert slug("The `[model]` table") == "the-model-table"
    assert slug("Plan your own event with your own telescope (10 minutes)") == \
        "plan-your-own-event-with-your-own-telescope-10-minutes"
    assert slug("`kncast plan`: the campaign plan") == "kncast-plan-the-campaign-plan"


def test_every_relative_link_resolves():
    files = markdown_files()
    assert (ROOT / "README.md") in files and any(f.is_relative_to(DOCS) for f in files)
    problems = []
    for page in files:
        for target in relative_links(page):
            file_part, _, anchor = target.partition("#")
            dest = (page.parent / unquote(file_part)).resolve() if file_part else page
            if not dest.exists():
                problems.append(f"{page.relative_to(ROOT)}: {target}: no such file")
            elif anchor and dest.suffix == ".md" and anchor not in anchors(dest):
                problems.append(f"{page.relative_to(ROOT)}: {target}: no heading with anchor #{anchor}")
    assert not problems, "\n".join(problems)


def sub_commands() -> dict[str, argparse.ArgumentParser]:
    parser = build_parser()
    subs = [a for a in parser._actions if isinstance(a, argparse._SubParsersAction)]
    assert subs, "the kncast parser has no sub-commands"
    return dict(subs[0].choices)


COMMANDS = sorted(sub_commands())


@pytest.mark.parametrize("name", COMMANDS)
def test_every_option_is_on_its_command_page(name):
    page = COMMAND_PAGES / f"{name}.md"
    assert page.exists(), f"docs/commands/{name}.md missing for `kncast {name}`"
    text = page.read_text(encoding="utf-8")
    options = sorted({opt for action in sub_commands()[name]._actions for opt in action.option_strings
                      if opt.startswith("--") and opt not in NOT_DOCUMENTED})
    assert options, f"kncast {name} has no long options"
    missing = [opt for opt in options if not re.search(rf"(?<![\w-]){re.escape(opt)}(?![\w-])", text)]
    assert not missing, f"docs/commands/{name}.md does not mention {', '.join(missing)}"


def test_every_command_is_in_the_readme_table():
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    missing = [n for n in COMMANDS if f"(docs/commands/{n}.md)" not in readme]
    assert not missing, f"README.md command table lacks {', '.join(missing)}"


def test_readme_is_short():
    size = (ROOT / "README.md").stat().st_size
    assert size <= README_MAX_BYTES, f"README.md is {size} bytes (at most {README_MAX_BYTES}): move reference material to docs/"
