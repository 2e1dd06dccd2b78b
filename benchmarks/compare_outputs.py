"""Compare two run folders table by table, byte for byte.

Used to show that a change which should not alter results did not: run the demo before and
after, then ``python benchmarks/compare_outputs.py BEFORE AFTER``. The report differs in the
run folder's path and the tables' modification times, so those two are normalised first.
Exit 0 when every file matches, 1 otherwise (each differing file is named).
"""
from __future__ import annotations

import re
import sys
from pathlib import Path

_VOLATILE = [
    (re.compile(rb"Run folder: <code>[^<]*</code>"), b"Run folder: <code>-</code>"),
    (re.compile(rb"modified \d{4}-\d\d-\d\d \d\d:\d\d UTC"), b"modified -"),
]


def _normalised(path: Path, root: Path) -> bytes:
    data = path.read_bytes()
    if path.suffix == ".html":
        data = data.replace(str(root).encode(), b"RUN")
        for pattern, repl in _VOLATILE:
            data = pattern.sub(repl, data)
    return data


def compare(before: Path, after: Path) -> list[str]:
    """Return one line per file that is missing or differs."""
    problems = []
    names = sorted({p.name for p in before.iterdir()} | {p.name for p in after.iterdir()})
    for name in names:
        a, b = before / name, after / name
        if not a.is_file() or not b.is_file():
            problems.append(f"{name}: only in {'after' if b.exists() else 'before'}")
        elif _normalised(a, before) != _normalised(b, after):
            problems.append(f"{name}: differs")
    return problems


if __name__ == "__main__":
    if len(sys.argv) != 3:
        sys.exit("usage: python benchmarks/compare_outputs.py BEFORE_DIR AFTER_DIR")
    found = compare(Path(sys.argv[1]), Path(sys.argv[2]))
    for line in found:
        print(line)
    print("identical" if not found else f"{len(found)} file(s) differ")
    sys.exit(1 if found else 0)
