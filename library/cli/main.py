"""kinetome command entry point."""

import sys


def main(argv: list[str] | None = None) -> int:
    print("kinetome: commands are being built", file=sys.stderr)
    return 2
