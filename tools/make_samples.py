"""Regenerate the invented demo recordings in audio_samples/, byte for byte.

The synthesis lives in ``filtertwin.files.samples`` (fixed seeds, nothing time-dependent).

Usage::

    python tools/make_samples.py [--out DIR]
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent


def main(argv: list[str] | None = None) -> int:
    """Write every demo file into ``--out`` (default: audio_samples/ of this repository)."""
    parser = argparse.ArgumentParser(description="Regenerate the invented demo recordings.")
    parser.add_argument("--out", type=Path, default=REPO / "audio_samples", help="folder")
    args = parser.parse_args(argv)
    try:
        from filtertwin.files import samples
    except ImportError:  # not installed: use this checkout's src/
        sys.path.insert(0, str(REPO / "src"))
        from filtertwin.files import samples
    for path in samples.write_all(args.out):
        print(f"{path.stat().st_size:>10} bytes  {path}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
