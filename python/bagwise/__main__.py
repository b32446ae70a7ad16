"""Command line: ``python -m bagwise demo``."""

from __future__ import annotations

import argparse
import sys


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog="python -m bagwise", description="bagwise tools")
    commands = parser.add_subparsers(dest="command", required=True)
    demo = commands.add_parser("demo", help="run the pipeline on the bundled demo data")
    demo.add_argument("--data", help="path to vineyards.csv (default: demo-data/)")
    demo.add_argument("--members", type=int, default=200, help="ensemble members (default 200)")
    demo.add_argument("--seed", type=int, default=0, help="seed (default 0)")
    args = parser.parse_args(argv)
    if args.command == "demo":
        from ._demo import run

        try:
            run(args.data, members=args.members, seed=args.seed, out=sys.stdout)
        except (FileNotFoundError, ValueError, TypeError) as err:
            print(f"error: {err}", file=sys.stderr)
            return 2
    return 0


if __name__ == "__main__":
    sys.exit(main())
