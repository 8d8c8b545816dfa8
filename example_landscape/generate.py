"""Regenerate the invented example landscape in this folder.

Usage (from anywhere)::

    python example_landscape/generate.py

Every file here except this script is written by
:func:`nutricap.example.write_example_landscape` with its fixed seed (README.md
from nutricap/example/README.md), so the output is the same on every run. All
content is invented for the example.
"""

from __future__ import annotations

import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent


def main() -> None:
    """Write the example project next to this script, using this checkout's package."""
    sys.path.insert(0, str(HERE.parent))
    from nutricap.example import write_example_landscape

    print(f"wrote {write_example_landscape(HERE)}")


if __name__ == "__main__":
    main()
