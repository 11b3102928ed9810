"""`python -m voxstrata ...`: the voxstrata command line."""

import sys

from . import main as _main


def main():
    sys.exit(_main())


if __name__ == "__main__":
    main()
