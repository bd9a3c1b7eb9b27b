"""Regenerate the INVENTED demo data of lagsieve (Merrow hake on the Caldrin Shelf).

All data written by this script are invented; see TRUTH.md, which it also writes.
The package must be installed (``pip install -e .``).

Usage: python resources/demo/generate.py [OUTDIR]   (default: this script's folder)
"""
from __future__ import annotations

import sys
from pathlib import Path

from lagsieve.demo import DEFAULT_SEED, write_demo


def main(argv: list[str]) -> int:
    if len(argv) > 1:
        print("usage: python resources/demo/generate.py [OUTDIR]", file=sys.stderr)
        return 2
    outdir = Path(argv[0]) if argv else Path(__file__).resolve().parent
    for path in write_demo(outdir, seed=DEFAULT_SEED):
        print(path)
    return 0


if __name__ == "__main__":
    raise SystemExit(main(sys.argv[1:]))
