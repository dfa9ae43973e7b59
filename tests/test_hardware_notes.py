"""The hardware notes stay in step with the code: links resolve, documented settings exist."""

from __future__ import annotations

import dataclasses
import re
import tomllib
from pathlib import Path

import pytest

from livecoach.setup_check.settings import CheckConfig

NOTES = Path(__file__).resolve().parent.parent / "hardware_notes"
_LINK = re.compile(r"\]\(([^)#\s]+\.md)?(#[^)\s]+)?\)")


def _anchors(text: str) -> set[str]:
    """GitHub-style heading anchors: lower case, punctuation dropped, spaces to hyphens."""
    out = set()
    for line in text.splitlines():
        if line.startswith("#"):
            title = line.lstrip("#").strip().lower()
            out.add(re.sub(r"[^\w\- ]", "", title).replace(" ", "-"))
    return out


@pytest.mark.parametrize("name", sorted(p.name for p in NOTES.glob("*.md") if p.name != "mcu_line_protocol.md"))
def test_links_between_notes_resolve(name):
    text = (NOTES / name).read_text(encoding="utf-8")
    for target, anchor in _LINK.findall(text):
        path = NOTES / target if target else NOTES / name
        assert path.is_file(), f"{name}: link to missing {target}"
        if anchor:
            assert anchor[1:] in _anchors(path.read_text(encoding="utf-8")), f"{name}: {target}{anchor}"


def test_documented_check_settings_match_the_code():
    text = (NOTES / "start_line.md").read_text(encoding="utf-8")
    block = re.search(r"```toml\n(\[check\].*?)```", text, re.S).group(1)
    documented = tomllib.loads(block)["check"]
    defaults = {f.name: f.default for f in dataclasses.fields(CheckConfig)}
    assert documented == defaults


def test_every_note_that_touches_hardware_carries_a_caution():
    for name in ("board_setup.md", "wiring.md", "power.md"):
        text = (NOTES / name).read_text(encoding="utf-8")
        assert "**Caution.**" in text, name
    readme = (NOTES / "README.md").read_text(encoding="utf-8")
    assert "rules" in readme and "scrutineers" in readme
