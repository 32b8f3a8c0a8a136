"""Write docs/validation.md: every reference check of the test suite, run now.

The checks (quantity, published source, expected value, tolerance, test) live in
``tests/reference_cases.py``; the tests assert them and this script runs the same functions
to put the tool's current value beside each one. ``tests/test_validation_doc.py`` fails when
the committed file differs from a fresh run, so regenerate after changing a check or the
physics:

    python scripts/make_validation.py            # writes docs/validation.md
    python scripts/make_validation.py --check    # exit 1 if docs/validation.md is stale

Takes a few seconds once the numba kernels are compiled (the first run compiles them).
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
if str(ROOT) not in sys.path:
    sys.path.insert(0, str(ROOT))  # the registry lives in tests/

from lapbalance.outputs import write_text_atomic  # noqa: E402
from tests.reference_cases import VALIDATION_DOC, render_markdown  # noqa: E402


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", default=str(ROOT / VALIDATION_DOC), help="file to write")
    ap.add_argument("--check", action="store_true",
                    help="do not write; exit 1 when the file differs from a fresh run")
    args = ap.parse_args(argv)
    text = render_markdown()
    out = Path(args.out)
    if args.check:
        current = out.read_text(encoding="utf-8") if out.is_file() else ""
        if current != text:
            print(f"{out} is out of date; run python scripts/make_validation.py")
            return 1
        print(f"{out} is up to date")
        return 0
    write_text_atomic(out, text)
    print(f"wrote {out}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
