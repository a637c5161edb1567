"""The docs stay a short README and a manual whose links and commands are real.

Read from the files; the command names come from the typer app the ``sweep`` script runs.
"""

from __future__ import annotations

import re
from pathlib import Path
from urllib.parse import unquote

ROOT = Path(__file__).resolve().parents[2]
README = ROOT / "README.md"
MAX_README_BYTES = 12_000
LINK = re.compile(r"!?\[[^\]]*\]\(([^)\s]+)(?:\s+\"[^\"]*\")?\)")
COMMAND = re.compile(r"(?<![\w./-])sweep ([a-z][a-z-]*)")
FENCE = re.compile(r"^```[^\n]*\n(.*?)^```", re.S | re.M)
SPAN = re.compile(r"`([^`\n]+)`")


def _documents() -> list[Path]:
    return [README, *sorted((ROOT / "docs").glob("*.md"))]


def _relative_links(text: str) -> list[str]:
    targets = []
    for target in LINK.findall(text):
        if re.match(r"^[a-z][a-z0-9+.-]*:", target) or target.startswith("#"):
            continue  # a URL (http:, mailto:) or an anchor in the same page
        targets.append(unquote(target.split("#", 1)[0]))
    return targets


def _code(text: str) -> str:
    """The README's code: fenced blocks and inline spans, where commands are written (not prose)."""
    blocks = FENCE.findall(text)
    return "\n".join(blocks + SPAN.findall(FENCE.sub("", text)))


def _command_names() -> set[str]:
    from typer.main import get_command

    from sweep.cli import app

    return set(get_command(app).commands)


def test_readme_is_short():
    size = len(README.read_bytes())
    assert size < MAX_README_BYTES, f"README.md is {size} bytes; move detail into docs/"


def test_relative_links_resolve():
    broken = [f"{doc.relative_to(ROOT)}: {target}"
              for doc in _documents()
              for target in _relative_links(doc.read_text(encoding="utf-8"))
              if not (doc.parent / target).exists()]
    assert not broken, broken


def test_readme_mentions_only_real_commands():
    mentioned = set(COMMAND.findall(_code(README.read_text(encoding="utf-8"))))
    assert mentioned, "the README names no `sweep <command>`"
    unknown = sorted(mentioned - _command_names())
    assert not unknown, f"README.md names commands the CLI does not have: {unknown}"
