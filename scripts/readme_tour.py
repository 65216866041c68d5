"""Run every shell block of the README as written, and rewrite the tour's shown output from real runs.

    python scripts/readme_tour.py --check     # run the blocks in a fresh folder; exit 1 if any differs
    python scripts/readme_tour.py --write     # run them and rewrite README.md's tour blocks in place

Each fenced shell block of README.md is preceded by one marker comment that
says how it is run (an HTML comment: invisible where the README is rendered):

``<!-- tour -->`` / ``<!-- tour: keep=1-3,9-;all -->``
    Lines starting with ``$ `` are commands (a trailing ``\\`` continues one
    on the next line); what follows a command up to the next one is its
    shown output. ``keep`` lists, per command in order (``;``-separated,
    ``all`` by default), the output lines shown; each run of lines left out
    is written as one ``...`` line; ``none`` shows no output. ``--write`` regenerates these lines;
    ``--check`` compares them with a new run, numbers within one unit of
    their last shown digit, everything else exactly (spacing aside).
``<!-- run -->``
    Every line that is not a comment is a command (``\\`` continues it); each
    must exit 0. Nothing is compared.
A ``python`` block marked ``<!-- run -->`` runs whole, as one program, and must exit 0.
``<!-- not run: REASON -->``
    Shown only (e.g. ``make test``, which would run this check itself).

All blocks of the README run in order in one fresh folder, as a reader
following it would: the first tour block writes the demo there. Commands
run through ``bash -c`` with the project's venv first on PATH, stdout and
stderr together, 100 columns, no colour, no terminal.
"""

from __future__ import annotations

import argparse
import math
import os
import re
import subprocess
import sys
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
README = ROOT / "README.md"
WIDTH = 100
_MARKER = re.compile(r"^<!--\s*(tour|run|not run)\s*(?::\s*(.*?))?\s*-->\s*$")
_FENCE = re.compile(r"^```(\w*)\s*$")
_NUMBER = re.compile(r"^[+-]?(?:\d[\d,]*\.?\d*|\.\d+)(?:e[+-]?\d+)?%?$", re.IGNORECASE)


@dataclass
class Block:
    kind: str  # "tour", "run", "not run", or "" (a shell block without a marker)
    language: str
    option: str  # keep=... for a tour, the reason for "not run"
    start: int  # index of the first line inside the fence
    end: int  # index of the closing fence
    lines: list[str] = field(default_factory=list)

    def commands(self) -> list[tuple[str, list[str]]]:
        """(command, shown output lines) in order; a "run" block has no shown output."""
        out: list[tuple[str, list[str]]] = []
        pending = None
        for line in self.lines:
            if pending is not None:
                pending += "\n" + line
                if not line.rstrip().endswith("\\"):
                    out.append((_join(pending), []))
                    pending = None
                continue
            is_command = line.startswith("$ ") if self.kind == "tour" else (
                line.strip() and not line.lstrip().startswith("#"))
            if is_command:
                text = line[2:] if self.kind == "tour" else line
                if text.rstrip().endswith("\\"):
                    pending = text
                else:
                    out.append((_join(text), []))
            elif self.kind == "tour" and out:
                out[-1][1].append(line)
        if pending is not None:
            out.append((_join(pending), []))
        return out

    def keeps(self) -> list[str]:
        m = re.match(r"keep=(.*)", self.option or "")
        return [k.strip() for k in m.group(1).split(";")] if m else []


def _join(text: str) -> str:
    """A command as the shell reads it (a trailing backslash joins lines); also what is displayed first."""
    return text


def blocks(readme: str) -> list[Block]:
    """Every fenced block with no language or a shell one, with the marker line just above it."""
    lines = readme.split("\n")
    found, k = [], 0
    while k < len(lines):
        m = _FENCE.match(lines[k])
        if not m:
            k += 1
            continue
        end = k + 1
        while end < len(lines) and not lines[end].startswith("```"):
            end += 1
        above = next((lines[j] for j in range(k - 1, -1, -1) if lines[j].strip()), "")
        mk = _MARKER.match(above)
        shell = m.group(1) in ("", "sh", "bash", "shell", "console")
        if shell or (m.group(1) == "python" and mk):
            found.append(Block(kind=mk.group(1) if mk else "", language=m.group(1),
                               option=(mk.group(2) or "") if mk else "", start=k + 1, end=end,
                               lines=lines[k + 1:end]))
        k = end + 1
    return found


def environment() -> dict:
    env = dict(os.environ)
    env["PATH"] = str(Path(sys.executable).parent) + os.pathsep + env.get("PATH", "")
    env.update(COLUMNS=str(WIDTH), LINES="50", NO_COLOR="1", TERM="dumb", OPENBLAS_NUM_THREADS="1")
    env.pop("FORCE_COLOR", None)
    return env


def run(command: str, cwd: Path, env: dict) -> tuple[int, list[str]]:
    p = subprocess.run(["bash", "-c", command], cwd=cwd, env=env, stdout=subprocess.PIPE,
                       stderr=subprocess.STDOUT, text=True, timeout=600)
    return p.returncode, p.stdout.rstrip("\n").split("\n") if p.stdout.strip() else []


def _ranges(spec: str, n: int) -> list[bool]:
    """Which of n output lines ``spec`` keeps ('all', or '1-3,7,9-' with 1-based lines)."""
    if spec in ("", "all"):
        return [True] * n
    if spec == "none":
        return [False] * n
    keep = [False] * n
    for part in spec.split(","):
        lo, _, hi = part.partition("-")
        a = int(lo)
        b = (int(hi) if hi else n) if "-" in part else a
        for j in range(max(a, 1), min(b, n) + 1):
            keep[j - 1] = True
    return keep


def shown(output: list[str], spec: str) -> list[str]:
    """The kept lines of ``output``, each run of left-out lines written as one '...'."""
    out, skipping = [], False
    kept = _ranges(spec, len(output))
    if not any(kept):
        return []
    for line, keep in zip(output, kept):
        if keep:
            out.append(line.rstrip())
            skipping = False
        elif not skipping:
            out.append("...")
            skipping = True
    return out


def _tokens(lines: list[str]) -> list[str]:
    return " ".join(lines).split()


def _same_token(want: str, got: str) -> bool:
    if want == got:
        return True
    if not (_NUMBER.match(want) and _NUMBER.match(got)):
        return False
    a, b = (float(t.rstrip("%").replace(",", "")) for t in (want, got))
    digits = want.rstrip("%").split("e")[0].split("E")[0]
    decimals = len(digits.split(".")[1]) if "." in digits else 0
    unit = 10.0 ** -decimals
    if "e" in want.lower():  # e-notation: one unit of the last digit of the mantissa
        unit *= 10.0 ** int(want.lower().split("e")[1]) if math.isfinite(a) else 1.0
    return abs(a - b) <= 1.01 * unit


def differences(want: list[str], got: list[str]) -> str | None:
    """None when the shown lines agree with a new run's kept lines; else the first difference."""
    w, g = _tokens(want), _tokens(got)
    for k, (a, b) in enumerate(zip(w, g)):
        if not _same_token(a, b):
            return f"README shows {' '.join(w[max(k - 4, 0):k + 4])!r}, the run gives {' '.join(g[max(k - 4, 0):k + 4])!r}"
    if len(w) != len(g):
        return f"README shows {len(w)} tokens, the run gives {len(g)}: ...{' '.join((w if len(w) > len(g) else g)[min(len(w), len(g)):][:8])!r}"
    return None


def run_readme(readme: str, folder: Path, *, write: bool = False) -> tuple[list[str], str]:
    """Run every block in order in ``folder``; return (problems, README text with regenerated tour output)."""
    env = environment()
    problems = []
    lines = readme.split("\n")
    replacements = []
    for b in blocks(readme):
        where = f"README line {b.start}"
        if b.kind == "":
            problems.append(f"{where}: a shell block without a marker (<!-- tour -->, <!-- run --> or "
                            "<!-- not run: why -->)")
            continue
        if b.kind == "not run":
            if not b.option:
                problems.append(f"{where}: 'not run' needs a reason")
            continue
        if b.language == "python":
            p = subprocess.run([sys.executable, "-c", "\n".join(b.lines)], cwd=folder, env=env, text=True,
                               stdout=subprocess.PIPE, stderr=subprocess.STDOUT, timeout=600)
            if p.returncode != 0:
                problems.append(f"{where}: the python block exited {p.returncode}: {p.stdout.strip()[-300:]}")
            continue
        keeps = b.keeps()
        new_lines = []
        for j, (command, want) in enumerate(b.commands()):
            code, output = run(command, folder, env)
            if code != 0:
                problems.append(f"{where}: `{command.splitlines()[0]}` exited {code}: {' | '.join(output[-3:])}")
            if b.kind != "tour":
                continue
            got = shown(output, keeps[j] if j < len(keeps) else "all")
            diff = differences([x for x in want if x != "..."], [x for x in got if x != "..."])
            if diff and not write:
                problems.append(f"{where}: `{command.splitlines()[0]}`: {diff}")
            new_lines += ["$ " + command.split("\n")[0]] + command.split("\n")[1:] + got
        if b.kind == "tour":
            replacements.append((b.start, b.end, new_lines))
    for start, end, new in reversed(replacements):
        lines[start:end] = new
    return problems, "\n".join(lines)


def help_examples(help_text: str) -> list[str]:
    """The commands of ``afterlook --help``'s examples ("  afterlook ..." lines, a trailing backslash
    continuing one), except ``review``: the workbench needs a terminal, and its line says so."""
    out, pending = [], None
    for line in help_text.splitlines():
        if pending is not None:
            pending += "\n" + line
            if not line.rstrip().endswith("\\"):
                out.append(pending)
                pending = None
            continue
        if line.startswith("  afterlook "):
            text = line.strip()
            if text.endswith("\\"):
                pending = text
            else:
                out.append(text)
    return [c for c in out if not c.split()[1] == "review"]


def run_help_examples(folder: Path) -> list[str]:
    """Run the --help examples in order in ``folder``; the problems (a non-zero exit), if any."""
    env = environment()
    code, lines = run("afterlook --help", folder, env)
    problems = [] if code == 0 else [f"afterlook --help exited {code}"]
    commands = help_examples("\n".join(lines))
    if not commands:
        problems.append("afterlook --help shows no examples")
    for command in commands:
        code, output = run(command, folder, env)
        if code != 0:
            problems.append(f"--help example `{command.splitlines()[0]}` exited {code}: {' | '.join(output[-3:])}")
    return problems


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    group = ap.add_mutually_exclusive_group(required=True)
    group.add_argument("--check", action="store_true", help="run and compare; exit 1 on any difference")
    group.add_argument("--write", action="store_true", help="run and rewrite the tour output in README.md")
    ap.add_argument("--readme", default=str(README))
    args = ap.parse_args(argv)
    text = Path(args.readme).read_text(encoding="utf-8")
    with tempfile.TemporaryDirectory(prefix="afterlook-readme-") as tmp:
        problems, new = run_readme(text, Path(tmp), write=args.write)
    for p in problems:
        print(p, file=sys.stderr)
    if args.write and new != text:
        Path(args.readme).write_text(new, encoding="utf-8")
        print(f"rewrote the tour blocks of {args.readme}")
    return 1 if problems else 0


if __name__ == "__main__":
    raise SystemExit(main())
