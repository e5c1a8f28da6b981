"""``isotide open PATH``: the window on a study, a saved result or a working session."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from app.verbs.launch import launch

HELP = "open the window on a study (DICOM file or folder, NIfTI, PNG/TIFF), a saved result or a .tide working session"
PROG = "isotide open"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("path", metavar="PATH", help="study, NAME_dseg.json result or NAME.tide working session")
    parser.add_argument("--series", metavar="KEY", help="which series of a folder holding several")


def run(args: argparse.Namespace) -> int:
    if not Path(args.path).exists():
        print(f"{PROG}: {args.path}: no such file or folder", file=sys.stderr)
        return 2
    return launch(PROG, path=str(Path(args.path).resolve()), series=args.series)
