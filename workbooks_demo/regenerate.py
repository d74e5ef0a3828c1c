"""Regenerate the committed demo files: invented data (seeded) and the demo workbook.

Run from the repository root: python workbooks_demo/regenerate.py
It calls the same code as `sheetnet demo`, so the files here are what a user gets.
"""

from __future__ import annotations

import sys
from pathlib import Path

from sheetnet.cli import main

if __name__ == "__main__":
    folder = Path(__file__).resolve().parent
    sys.exit(main(["demo", "--out", str(folder), "--force", "--quiet"]))
