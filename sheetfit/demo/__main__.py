"""`python -m sheetfit.demo --write PATH [--scenario NAME] [--seed N]`: regenerate a demo workbook."""

from __future__ import annotations

import argparse
from pathlib import Path

from . import SCENARIOS, find_scenario


def _main(argv: list[str] | None = None) -> None:
    """Parse the options, write the chosen scenario's workbook and print where it went."""
    parser = argparse.ArgumentParser(prog="python -m sheetfit.demo",
                                     description="Write a seeded demo workbook of invented data.")
    parser.add_argument("--write", metavar="PATH", type=Path, required=True, help="where to write the workbook")
    parser.add_argument("--scenario", choices=SCENARIOS, default=SCENARIOS[0],
                        help=f"which demo (default {SCENARIOS[0]})")
    parser.add_argument("--seed", type=int, default=None, help="random seed (default: the scenario's own)")
    args = parser.parse_args(argv)
    chosen = find_scenario(args.scenario)
    print(chosen.write(args.write, chosen.seed if args.seed is None else args.seed))


if __name__ == "__main__":
    _main()
