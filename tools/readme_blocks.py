"""Regenerate (or check) every command-output block in README.md from the real command.

    python tools/readme_blocks.py            # check: exit 1 and show what differs
    python tools/readme_blocks.py --write    # rewrite the blocks (and the stated sample count)

A block of command output in README.md is a fenced code block with an HTML
comment on the line before it naming the command and, optionally, what of its
output the README shows::

    <!-- output: loopkit stage sample_designs/boost_liion_5v.toml | paragraphs "#" | head 5 -->
    ```
    ...
    ```

The command runs from the top of the repository with this checkout's
``loopkit`` (``python -m loopkit.cli``, UTF-8 output, like a terminal's).
Steps after ``|``, applied in order to its standard output:

``paragraphs TEXT ...``
    keep the paragraphs (runs of lines between blank lines) whose first line
    starts with one of the texts (shell quoting), in output order, a blank line
    between them;
``head N``
    keep the first N lines; when lines were cut, a last line ``...`` says so
    (the only elision a README block may show).

The README also states how many sample designs there are ("The seven files in
`sample_designs/`"); ``--write`` sets that number from the folder too.  Other
fenced blocks (commands to type) are left alone; tests/test_readme.py checks
that every block is either marked or a command line.
"""

from __future__ import annotations

import argparse
import difflib
import functools
import os
import re
import shlex
import subprocess
import sys
from dataclasses import dataclass
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
README = ROOT / "README.md"
SAMPLES_DIR = ROOT / "sample_designs"
ELISION = "..."

_MARKER = re.compile(r"^<!-- output: (?P<spec>.+?) -->\n```[^\n]*\n(?P<body>.*?)^```$", re.MULTILINE | re.DOTALL)
_FENCE = re.compile(r"^```[^\n]*\n(?P<body>.*?)^```$", re.MULTILINE | re.DOTALL)
_COUNT = re.compile(r"\b(?P<word>\w+)(?P<gap>\s+)files in(?P<gap2>\s+)`sample_designs/`")
# fmt: off
_WORDS = ["zero", "one", "two", "three", "four", "five", "six", "seven", "eight", "nine", "ten", "eleven", "twelve",
          "thirteen", "fourteen", "fifteen", "sixteen", "seventeen", "eighteen", "nineteen", "twenty"]
# fmt: on


@dataclass(frozen=True)
class Block:
    """One marked block: the command, the steps, the text shown and where it sits in the README."""

    command: str
    steps: tuple[tuple[str, ...], ...]
    body: str
    start: int  # offsets of the body in the README text
    end: int


def parse_spec(spec: str) -> tuple[str, tuple[tuple[str, ...], ...]]:
    """``"loopkit stage F | head 5"`` -> ``("loopkit stage F", (("head", "5"),))``."""
    command, *steps = (part.strip() for part in spec.split("|"))
    parsed = []
    for step in steps:
        words = tuple(shlex.split(step))
        if not words or words[0] not in ("paragraphs", "head"):
            raise ValueError(f"unknown step {step!r} in <!-- output: {spec} --> (paragraphs TEXT..., head N)")
        if words[0] == "head" and (len(words) != 2 or not words[1].isdigit()):
            raise ValueError(f"'head' takes one whole number: {step!r}")
        parsed.append(words)
    return command, tuple(parsed)


def find_blocks(text: str) -> list[Block]:
    """Every marked output block of a README text, in order."""
    blocks = []
    for m in _MARKER.finditer(text):
        command, steps = parse_spec(m.group("spec"))
        blocks.append(Block(command, steps, m.group("body"), m.start("body"), m.end("body")))
    return blocks


def unmarked_blocks(text: str) -> list[str]:
    """Bodies of fenced blocks that carry no output marker."""
    marked = {b.start for b in find_blocks(text)}
    return [m.group("body") for m in _FENCE.finditer(text) if m.start("body") not in marked]


@functools.cache
def run(command: str) -> str:
    """Standard output of a README command, run as a user would from the top of this checkout (once per process)."""
    argv = shlex.split(command)
    if not argv or argv[0] != "loopkit":
        raise ValueError(f"README output blocks show loopkit commands only, not {command!r}")
    env = {k: v for k, v in os.environ.items() if k not in ("COLUMNS", "LINES")}
    env["PYTHONPATH"] = os.pathsep.join([str(ROOT), *filter(None, [env.get("PYTHONPATH")])])
    env["PYTHONIOENCODING"] = "utf-8"
    proc = subprocess.run(
        [sys.executable, "-m", "loopkit.cli", *argv[1:]],
        check=False,
        cwd=ROOT,
        env=env,
        capture_output=True,
        text=True,
        encoding="utf-8",
        timeout=600,
    )
    if proc.returncode not in (0, 1):  # 1: targets not met, still a report worth showing
        raise RuntimeError(f"{command!r} exited {proc.returncode}: {proc.stderr.strip()}")
    return proc.stdout


def select(output: str, steps) -> str:
    """What of ``output`` the README shows (see the module's description)."""
    lines = output.rstrip("\n").split("\n")
    for step in steps:
        if step[0] == "paragraphs":
            paragraphs, current = [], []
            for line in [*lines, ""]:
                if line.strip():
                    current.append(line)
                elif current:
                    paragraphs.append(current)
                    current = []
            kept = [p for p in paragraphs if p[0].startswith(step[1:])]
            lines = [line for i, p in enumerate(kept) for line in ([""] if i else []) + p]
        elif step[0] == "head":
            n = int(step[1])
            lines = lines[:n] + [ELISION] if len(lines) > n else lines
    return "\n".join(lines) + "\n"


def expected(block: Block) -> str:
    """The body a block must have: its command's output, selected."""
    return select(run(block.command), block.steps)


def number_word(n: int) -> str:
    return _WORDS[n] if 0 <= n < len(_WORDS) else str(n)


def sample_count() -> int:
    return len(list(SAMPLES_DIR.glob("*.toml")))


def stated_sample_count(text: str) -> int | None:
    """The number of sample designs the README states, or None if it states none."""
    m = _COUNT.search(text)
    if m is None:
        return None
    word = m.group("word").lower()
    return _WORDS.index(word) if word in _WORDS else int(word) if word.isdigit() else None


_BOUNDS = re.compile(r"(<!-- bounds table: [^>]*-->\n)(.*?)(<!-- end of bounds table -->)", re.DOTALL)


def _bounds_markdown() -> str:
    """The README's table of physical bounds, from the checkout's own ``loopkit.bounds``."""
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
    from loopkit.bounds import bounds_markdown

    return bounds_markdown()


def regenerate(text: str) -> str:
    """The README text with every marked block and the sample count made true."""
    out, last = [], 0
    for block in find_blocks(text):
        out += [text[last : block.start], expected(block)]
        last = block.end
    text = "".join(out) + text[last:]
    text = _BOUNDS.sub(lambda m: m.group(1) + _bounds_markdown() + m.group(3), text, count=1)
    return _COUNT.sub(
        lambda m: f"{number_word(sample_count())}{m.group('gap')}files in{m.group('gap2')}`sample_designs/`",
        text,
        count=1,
    )


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description="Regenerate or check README.md's command-output blocks.")
    parser.add_argument("--write", action="store_true", help="rewrite README.md (default: check only)")
    parser.add_argument("--readme", type=Path, default=README, help="the README to work on")
    args = parser.parse_args(argv)
    text = args.readme.read_text(encoding="utf-8")
    new = regenerate(text)
    if args.write:
        if new != text:
            args.readme.write_text(new, encoding="utf-8")
        print(f"{args.readme}: {len(find_blocks(new))} output blocks, {'updated' if new != text else 'unchanged'}")
        return 0
    if new == text:
        print(f"{args.readme}: {len(find_blocks(text))} output blocks, all as the commands print them")
        return 0
    sys.stdout.writelines(
        difflib.unified_diff(text.splitlines(True), new.splitlines(True), "README.md", "README.md (from the commands)")
    )
    print("\nREADME.md differs from the commands' output: run  python tools/readme_blocks.py --write", file=sys.stderr)
    return 1


if __name__ == "__main__":
    sys.exit(main())
