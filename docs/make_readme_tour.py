"""Regenerate the README tour from real output, or check that it is current.

    python docs/make_readme_tour.py           # rewrite the tour's output blocks in README.md
    python docs/make_readme_tour.py --check   # exit 1 when README.md differs from real output

Every fenced block of the README's "Tour" section whose first line is ``$ simwave ...``
is a command: it runs, in order, in a fresh scratch folder (holding a copy of the
repository's ``examples/`` and a link to ``waveforms/``, so the commands read exactly
as a user types them from a checkout, and nothing is written into the repository), and
the block becomes the command followed by what it printed (stdout and stderr, as a
terminal shows them). Timings and worker counts differ from machine to machine; the
check compares the text with those masked (:func:`normalize`).
"""

from __future__ import annotations

import os
import re
import shlex
import shutil
import subprocess
import sys
import tempfile

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
README = os.path.join(ROOT, "README.md")
LINKED = ("waveforms",)  # read only: linked
COPIED = ("examples",)   # some examples write beside themselves: copied

#: What varies with the machine: each pattern's match is replaced by its mask.
_VARYING = (
    (re.compile(r"\(demo took [\d.]+ s\)"), "(demo took ... s)"),
    (re.compile(r"^(time\s+)[\d.]+ s$", re.M), r"\1... s"),
    (re.compile(r" in [\d.]+ s$", re.M), " in ... s"),
    (re.compile(r"\((local process pool, \d+ workers?|in-process, 1 job)\)"), "(engine)"),
    (re.compile(r"\b\d+(\.\d+)? (builds|pairs)/s\b"), "... /s"),
    (re.compile(r" run in [\d.]+ s on "), " run in ... s on "),
    (re.compile(r"(local process pool, \d+ workers?|in-process, 1 job)"), "(engine)"),
)


def normalize(text: str) -> str:
    """The text with timings and worker counts masked."""
    for pattern, mask in _VARYING:
        text = pattern.sub(mask, text)
    return text


def tour_blocks(lines: list[str]) -> list[tuple[int, int, str]]:
    """(first line, last line, command) of each ``$ simwave`` block in the Tour section."""
    start = next(i for i, ln in enumerate(lines) if ln.strip() == "## Tour")
    end = next(i for i in range(start + 1, len(lines)) if lines[i].startswith("## "))
    blocks = []
    i = start
    while i < end:
        if lines[i].strip() == "```" and i + 1 < end and lines[i + 1].startswith("$ simwave "):
            close = next(j for j in range(i + 2, end) if lines[j].strip() == "```")
            blocks.append((i + 1, close, lines[i + 1][2:].strip()))
            i = close
        i += 1
    return blocks


def run_tour(commands: list[str], scratch: str) -> list[str]:
    """What each command prints, run in order in ``scratch``."""
    for name in LINKED:
        os.symlink(os.path.join(ROOT, name), os.path.join(scratch, name))
    for name in COPIED:
        shutil.copytree(os.path.join(ROOT, name), os.path.join(scratch, name),
                        ignore=shutil.ignore_patterns("*-output", "__pycache__"))
    env = dict(os.environ, PYTHONPATH=ROOT + os.pathsep + os.environ.get("PYTHONPATH", ""),
               COLUMNS="100", PYTHONWARNINGS="default")
    outputs = []
    for command in commands:
        args = shlex.split(command)
        done = subprocess.run([sys.executable, "-m", "simwave", *args[1:]], cwd=scratch,
                              env=env, stdout=subprocess.PIPE, stderr=subprocess.STDOUT,
                              text=True, timeout=600)
        if done.returncode not in (0, 3):  # 3: a batch with results outside its limits
            raise SystemExit(f"tour command failed ({done.returncode}): {command}\n"
                             f"{done.stdout}")
        text = done.stdout.rstrip("\n")
        for where in {os.path.realpath(scratch), scratch}:  # the scratch folder's own name
            text = text.replace(where + os.sep, "")
        outputs.append(text)
    return outputs


def regenerate(readme_text: str, scratch: str) -> str:
    """README text with every tour block's output replaced by real output."""
    lines = readme_text.split("\n")
    blocks = tour_blocks(lines)
    outputs = run_tour([cmd for _, _, cmd in blocks], scratch)
    for (first, close, cmd), out in reversed(list(zip(blocks, outputs, strict=True))):
        lines[first:close] = [f"$ {cmd}", *out.split("\n")]
    return "\n".join(lines)


def main(argv: list[str]) -> int:
    check = "--check" in argv
    with open(README, encoding="utf-8") as fh:
        current = fh.read()
    with tempfile.TemporaryDirectory(prefix="simwave-tour-") as scratch:
        fresh = regenerate(current, scratch)
    if check:
        if normalize(fresh) == normalize(current):
            print("README tour is current")
            return 0
        old, new = normalize(current).split("\n"), normalize(fresh).split("\n")
        for i, (a, b) in enumerate(zip(old, new, strict=False)):
            if a != b:
                print(f"README.md line {i + 1} differs from real output:\n  README: {a}\n"
                      f"  now:    {b}\nrun: python docs/make_readme_tour.py")
                break
        else:
            print("README.md tour differs in length from real output; run: "
                  "python docs/make_readme_tour.py")
        return 1
    if fresh != current:
        with open(README, "w", encoding="utf-8") as fh:
            fh.write(fresh)
        print("README.md tour regenerated")
    else:
        print("README.md tour unchanged")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
