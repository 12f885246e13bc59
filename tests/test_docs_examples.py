"""The README and docs/ are executable documentation: every console example whose output they quote is run, and
every quoted line must be what the command prints.

A console block starts with ``$ hashaudit ...`` (continued with ``\\``); the lines after it, up to the next ``$``
line or the end of the block, are its quoted output. A quoted line matches a printed line when they are equal after
runs of spaces are collapsed; ``...`` or ``…`` inside a quoted line stands for any text (the pieces around it must
appear in order on one printed line), and a line of ``...`` alone skips any number of printed lines. Quoted lines
must appear in the quoted order. A quoted line indented by six spaces continues the line before it (a long printed
line wrapped for the page). The exit code is not checked (an audit that finds a flaw exits 1 on purpose).
"""

from __future__ import annotations

import re
import shlex
from dataclasses import dataclass
from pathlib import Path

import pytest
from cli_runner import run

ROOT = Path(__file__).resolve().parents[1]
DOCS = [ROOT / "README.md", *sorted((ROOT / "docs").glob("*.md"))]
ELISION = re.compile(r"\.\.\.|…")
WRAPPED = " " * 6


@dataclass(frozen=True)
class Example:
    doc: str
    line: int
    command: str
    quoted: tuple[str, ...]


def _blocks(text: str) -> list[tuple[int, list[str]]]:
    """Every fenced code block: the line number of its first line, and its lines."""
    blocks, current, start = [], None, 0
    for number, line in enumerate(text.splitlines(), 1):
        if line.startswith("```"):
            if current is None:
                current, start = [], number + 1
            else:
                blocks.append((start, current))
                current = None
        elif current is not None:
            current.append(line)
    return blocks


def examples() -> list[Example]:
    found = []
    for doc in DOCS:
        for first, lines in _blocks(doc.read_text(encoding="utf-8")):
            i = 0
            while i < len(lines):
                if not lines[i].startswith("$ hashaudit "):
                    i += 1
                    continue
                start = i
                command = [lines[i].removeprefix("$ ")]
                while command[-1].endswith("\\") and i + 1 < len(lines):
                    i += 1
                    command.append(lines[i].strip())
                i += 1
                quoted: list[str] = []
                while i < len(lines) and not lines[i].startswith("$ "):
                    if lines[i].startswith(WRAPPED) and quoted and quoted[-1].strip():
                        quoted[-1] += " " + lines[i].strip()  # a long printed line wrapped for the page
                    else:
                        quoted.append(lines[i])
                    i += 1
                if any(q.strip() for q in quoted):
                    joined = " ".join(part.rstrip("\\").strip() for part in command)
                    found.append(Example(doc.name, first + start, joined, tuple(quoted)))
    return found


def _squash(line: str) -> str:
    return " ".join(line.split())


def _matches(quoted: str, printed: str) -> bool:
    pieces = [_squash(p) for p in ELISION.split(quoted)]
    text = _squash(printed)
    if len(pieces) == 1:
        return pieces[0] == text
    if not text.startswith(pieces[0]) or not text.endswith(pieces[-1]):
        return False
    at = len(pieces[0])
    for piece in pieces[1:-1]:
        found = text.find(piece, at)
        if found < 0:
            return False
        at = found + len(piece)
    return at <= len(text) - len(pieces[-1])


def missing_lines(quoted: tuple[str, ...], printed: list[str]) -> list[str]:
    """The quoted lines not found, in order, among the printed ones (blank quoted lines are layout)."""
    missing = []
    at = 0
    for line in quoted:
        if not line.strip() or ELISION.fullmatch(line.strip()):
            continue
        hit = next((j for j in range(at, len(printed)) if _matches(line, printed[j])), None)
        if hit is None:
            missing.append(line)
        else:
            at = hit + 1
    return missing


EXAMPLES = examples()


def test_the_docs_quote_examples():
    assert len(EXAMPLES) >= 5, [e.command for e in EXAMPLES]


SLOW_EXAMPLE = "--checks tables,growth"  # the growth and order replays of the worked example take half a minute


def _marked(example: Example) -> object:
    return pytest.param(example, marks=pytest.mark.slow) if SLOW_EXAMPLE in example.command else example


@pytest.mark.parametrize("example", [_marked(e) for e in EXAMPLES], ids=[f"{e.doc}:{e.line}" for e in EXAMPLES])
def test_every_quoted_line_is_what_the_command_prints(example: Example):
    args = shlex.split(example.command)[1:]
    args = [str(ROOT / a) if a.startswith("sample_keys/") else a for a in args]
    code, out, err = run(args)
    assert code in (0, 1), err
    printed = (out + err).replace(str(ROOT) + "/", "").splitlines()
    assert missing_lines(example.quoted, printed) == [], "\n".join(printed)


def test_the_matcher_reads_elisions():
    assert _matches("FAIL  identity   high 2^12  colliding_pairs  ...", "FAIL identity high 2^12 colliding_pairs 800 M")
    assert _matches("a … c", "a b c")
    assert not _matches("a … c", "a b d")
    assert missing_lines(("one", "...", "three"), ["one", "two", "three"]) == []
    assert missing_lines(("three", "one"), ["one", "two", "three"]) == ["one"]


def test_every_relative_link_of_the_docs_points_to_a_file():
    broken = []
    for doc in DOCS:
        for target in re.findall(r"\]\(([^)#\s]+)(?:#[^)]*)?\)", doc.read_text(encoding="utf-8")):
            if "://" not in target and not (doc.parent / target).exists():
                broken.append(f"{doc.name}: {target}")
    assert broken == []


def test_the_readme_stays_a_front_page():
    """The reference lives in docs/: the README keeps the job, the two commands, a first audit, recipes, links."""
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    assert len(readme.encode()) < 20_000
    assert "make demo" in readme and "make test" in readme
