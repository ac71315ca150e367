"""Every command the documentation shows runs as written and exits as documented.

A new user copies commands out of the README and the guides; each must work from a fresh clone
after the README's set-up. This test reads the Markdown files and runs their commands:

- Every fenced block must say what it holds (```sh, ```console, ```text, ```toml, ...), so that a
  command line cannot hide in a block nobody runs. Synopses, program output and error messages go
  in ```text blocks; they are not run.
- In ```sh and ```console blocks every line that starts with `ringmain ` (`$ ringmain ` in
  console blocks; a trailing backslash continues a line) is run from a scratch folder holding a
  copy of `examples/` and `tests/data/`, with the release program first on the PATH. It must
  exit 0, or with the code a trailing comment `# exits N` gives.
- In ```console blocks the lines after a command are (part of) its output: each one that is not
  `...` must appear, up to spacing, among the lines the command printed.

Lines that are not `ringmain` commands (cargo, pip, cc, install) are covered by the test script
itself, which performs the set-up, and by scripts/test-embedding.sh.
"""

from __future__ import annotations

import os
import re
import shlex
import shutil
import subprocess
from dataclasses import dataclass
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]
DOCUMENTS = [
    "README.md",
    "DEVELOPERS.md",
    "examples/README.md",
    "ffi/README.md",
    "bindings/python/README.md",
    *sorted(str(p.relative_to(REPO)) for p in (REPO / "docs").glob("*.md")),
]
RUN_TIMEOUT = 300
EXIT_COMMENT = re.compile(r"\s+#\s*exits\s+(\d+)\s*$")


@dataclass
class Command:
    document: str
    line: int
    text: str
    exit_code: int
    expected_output: list[str]

    @property
    def name(self) -> str:
        return f"{self.document}:{self.line}"


def fenced_blocks(path: Path):
    """Yields (info string, first line number, lines) of every fenced block of a Markdown file."""
    lines = path.read_text(encoding="utf-8").splitlines()
    i = 0
    while i < len(lines):
        m = re.match(r"^(\s*)(```+)(.*)$", lines[i])
        if m:
            fence, info = m.group(2), m.group(3).strip()
            start = i + 1
            j = start
            while j < len(lines) and not lines[j].strip().startswith(fence):
                j += 1
            yield info, start + 1, lines[start:j]
            i = j + 1
        else:
            i += 1


def commands_of(document: str) -> list[Command]:
    found = []
    for info, first, lines in fenced_blocks(REPO / document):
        if info not in ("sh", "console"):
            continue
        prompt = "$ " if info == "console" else ""
        k = 0
        while k < len(lines):
            raw = lines[k]
            stripped = raw.strip()
            if not stripped.startswith(prompt + "ringmain "):
                k += 1
                continue
            line_no = first + k
            text = stripped[len(prompt):]
            while text.endswith("\\") and k + 1 < len(lines):
                k += 1
                text = text[:-1] + " " + lines[k].strip()
            exit_code = 0
            m = EXIT_COMMENT.search(text)
            if m:
                exit_code = int(m.group(1))
                text = text[: m.start()]
            text = re.sub(r"\s+#.*$", "", text)
            output: list[str] = []
            if info == "console":
                while k + 1 < len(lines) and not lines[k + 1].strip().startswith("$ "):
                    k += 1
                    if lines[k].strip() and lines[k].strip() != "...":
                        output.append(lines[k])
            found.append(Command(document, line_no, text, exit_code, output))
            k += 1
    return found


ALL_COMMANDS = [c for d in DOCUMENTS if (REPO / d).exists() for c in commands_of(d)]


def program() -> Path:
    path = Path(os.environ.get("RINGMAIN_BIN", REPO / "target" / "release" / "ringmain"))
    if not path.exists():
        pytest.skip(f"the program is not built ({path}); run `cargo build --release`")
    return path


@pytest.mark.parametrize("document", [d for d in DOCUMENTS if (REPO / d).exists()])
def test_every_block_says_what_it_holds(document: str) -> None:
    untagged = [first - 1 for info, first, _ in fenced_blocks(REPO / document) if not info]
    assert not untagged, (
        f"{document}: fenced blocks without a language at lines {untagged}; use ```sh for commands "
        "to run, ```console for a command and its output, ```text for synopses and output"
    )


def test_the_documents_show_commands() -> None:
    # The README alone shows a dozen; fewer means the scan above stopped finding them.
    assert len(ALL_COMMANDS) >= 10, [c.name for c in ALL_COMMANDS]


@pytest.fixture(scope="module")
def scratch(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("documented")
    shutil.copytree(REPO / "examples", root / "examples")
    shutil.copytree(REPO / "tests" / "data", root / "tests" / "data")
    return root


def normalise(line: str) -> str:
    return " ".join(line.split())


@pytest.mark.parametrize("command", ALL_COMMANDS, ids=lambda c: c.name)
def test_documented_command_runs_as_written(command: Command, scratch: Path) -> None:
    binary = program()
    env = dict(os.environ)
    env["PATH"] = f"{binary.parent}{os.pathsep}{env.get('PATH', '')}"
    argv = shlex.split(command.text)
    assert argv[0] == "ringmain"
    argv[0] = str(binary)
    run = subprocess.run(
        argv, cwd=scratch, env=env, capture_output=True, text=True, timeout=RUN_TIMEOUT, check=False
    )
    assert run.returncode == command.exit_code, (
        f"{command.name}: `{command.text}` exited {run.returncode}, the document says "
        f"{command.exit_code}\nstdout:\n{run.stdout[-2000:]}\nstderr:\n{run.stderr[-2000:]}"
    )
    printed = {normalise(line) for line in (run.stdout + run.stderr).splitlines()}
    missing = [line for line in command.expected_output if normalise(line) not in printed]
    assert not missing, f"{command.name}: the document shows output the program does not print: {missing}"
