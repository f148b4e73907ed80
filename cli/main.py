"""Entry point of the ``geosim`` console command."""
import sys


def main(argv=None) -> int:
    print("geosim command line: under construction", file=sys.stderr)
    return 0
