"""Fingerprint the demo's model files, rating tables and exhibits, to check that a change kept them.

Usage::

    python scripts/demo_fingerprint.py DEMO_DIR > after.txt
    python scripts/demo_fingerprint.py DEMO_DIR --against before.txt

Prints one ``sha256  path`` line per file of ``run/models/``, ``table/`` and ``glm_table/`` (the exhibit
included), sorted by path. With ``--against``, prints the files that differ, appeared or vanished
and exits 1 if there is any.
"""

from __future__ import annotations

import argparse
import hashlib
import sys
from pathlib import Path

FOLDERS = ("run/models", "table", "glm_table")


def fingerprint(demo_dir: Path) -> dict[str, str]:
    """sha256 of every file under the demo's model and table folders, keyed by relative path."""
    out = {}
    for folder in FOLDERS:
        for path in sorted((demo_dir / folder).rglob("*")):
            if path.is_file():
                out[path.relative_to(demo_dir).as_posix()] = hashlib.sha256(path.read_bytes()).hexdigest()
    return out


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("demo_dir", type=Path)
    parser.add_argument("--against", type=Path, help="an earlier output of this script")
    args = parser.parse_args()
    now = fingerprint(args.demo_dir)
    if args.against is None:
        for path, digest in now.items():
            print(f"{digest}  {path}")
        return 0
    before = dict(reversed(line.split("  ", 1)) for line in args.against.read_text().splitlines() if line)
    differ = sorted(p for p in now.keys() & before.keys() if now[p] != before[p])
    gone, new = sorted(before.keys() - now.keys()), sorted(now.keys() - before.keys())
    for label, paths in (("differs", differ), ("missing", gone), ("new", new)):
        for p in paths:
            print(f"{label}: {p}")
    print(f"{len(now)} files compared: {len(differ)} differ, {len(gone)} missing, {len(new)} new")
    return 1 if differ or gone or new else 0


if __name__ == "__main__":
    sys.exit(main())
