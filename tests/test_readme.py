"""README facts are the program's own: every output block equals its command's output.

The reference is the real command (``python -m loopkit.cli ...`` from the top of the
checkout, as ``tools/readme_blocks.py`` runs it); the only elision a block may show is a
last line ``...`` where its marker asks for ``head N``.  When a block differs, run
``python tools/readme_blocks.py --write`` and read the diff before committing it.
"""

from __future__ import annotations

import importlib.util
import sys
import tomllib
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text(encoding="utf-8")

_spec = importlib.util.spec_from_file_location("readme_blocks", ROOT / "tools" / "readme_blocks.py")
readme_blocks = importlib.util.module_from_spec(_spec)
sys.modules["readme_blocks"] = readme_blocks  # dataclasses look their module up there
_spec.loader.exec_module(readme_blocks)

BLOCKS = readme_blocks.find_blocks(README)
FIX = "README block differs from the command's output: run  python tools/readme_blocks.py --write"


def test_the_readme_shows_command_output_blocks():
    commands = [b.command for b in BLOCKS]
    assert any(c.startswith("loopkit stage ") for c in commands)
    assert any(c.startswith("loopkit design ") for c in commands)


@pytest.mark.parametrize("block", BLOCKS, ids=[b.command for b in BLOCKS])
def test_every_output_block_is_the_commands_output(block):
    shown = block.body
    want = readme_blocks.expected(block)
    assert shown == want, FIX
    # the only elision: a last "..." line, and only where the marker cuts with head N
    cut = any(step[0] == "head" for step in block.steps)
    lines = shown.rstrip("\n").split("\n")
    assert readme_blocks.ELISION not in lines[:-1]
    assert (lines[-1] == readme_blocks.ELISION) <= cut


def test_every_other_block_is_a_command_to_type():
    """A fenced block without a marker must be something to type, never hand-copied output."""
    for body in readme_blocks.unmarked_blocks(README):
        lines = [line for line in body.splitlines() if line.strip()]
        assert len(lines) == 1 and lines[0].startswith(("bash ", "python ", "loopkit ", "pip ")), body


def test_stated_sample_count_is_the_number_of_samples():
    stated = readme_blocks.stated_sample_count(README)
    assert stated is not None, "README no longer says how many files are in sample_designs/"
    assert stated == len(list((ROOT / "sample_designs").glob("*.toml"))), FIX


def test_selection_steps():
    """The selection language itself (inputs of our own)."""
    out = "title\nfile: x\n\n#  a\n1\n2\n3\n\nnotes\nmore\n"
    assert readme_blocks.select(out, [("paragraphs", "#")]) == "#  a\n1\n2\n3\n"
    assert readme_blocks.select(out, [("paragraphs", "#", "notes")]) == "#  a\n1\n2\n3\n\nnotes\nmore\n"
    assert readme_blocks.select(out, [("paragraphs", "#"), ("head", "2")]) == "#  a\n1\n...\n"
    assert readme_blocks.select(out, [("paragraphs", "#"), ("head", "4")]) == "#  a\n1\n2\n3\n"  # nothing cut
    assert readme_blocks.parse_spec('loopkit stage f.toml | paragraphs "#" x | head 5') == (
        "loopkit stage f.toml",
        (("paragraphs", "#", "x"), ("head", "5")),
    )
    with pytest.raises(ValueError):
        readme_blocks.parse_spec("loopkit stage f.toml | tail 3")
    with pytest.raises(ValueError):
        readme_blocks.run("rm -rf /")  # only loopkit commands


def test_write_fixes_a_drifted_block(tmp_path):
    """The tool the lead runs after a merge repairs a stale block and count, and leaves the rest."""
    block = BLOCKS[0]
    stale = README[: block.start] + "0   2.8  100m  29.0  DCM\n" + README[block.end :]
    stale = stale.replace(f"{readme_blocks.number_word(readme_blocks.sample_count())} files in", "six files in", 1)
    path = tmp_path / "README.md"
    path.write_text(stale, encoding="utf-8")
    assert readme_blocks.main(["--readme", str(path)]) == 1  # check mode: differs
    assert readme_blocks.main(["--readme", str(path), "--write"]) == 0
    assert path.read_text(encoding="utf-8") == README


def test_pyproject_license_is_pep_639():
    meta = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    project = meta["project"]
    assert project["license"] == "MIT"  # an SPDX expression, not the deprecated table
    assert all((ROOT / f).is_file() for f in project["license-files"])
    build = meta["build-system"]["requires"]
    assert any(
        r.replace(" ", "").startswith("setuptools>=") and int(r.split(">=")[1].split(".")[0]) >= 77 for r in build
    )  # setuptools reads PEP 639 license fields from 77 on
    assert any(d.startswith("tomlkit") for d in project["dependencies"])


def test_the_example_error_message_is_loopkits():
    """The README quotes one load error inline; it must be what loopkit says for that value."""
    import re

    from loopkit.designfile import loads_design
    from loopkit.errors import DesignFileError

    m = re.search(r"`(design\.toml): stage\.inductance = (\S+): ([^`]+)`", README.replace("\n", " "))
    assert m, "README no longer quotes the inductance error example"
    text = (ROOT / "sample_designs" / "buck_24v_3v3.toml").read_text(encoding="utf-8")
    assert 'inductance = "4.7u"' in text
    with pytest.raises(DesignFileError) as err:
        loads_design(text.replace('inductance = "4.7u"', f'inductance = "{m.group(2)}"'), m.group(1))
    assert str(err.value) == f"{m.group(1)}: stage.inductance = {m.group(2)}: {m.group(3)}"
