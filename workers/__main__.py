"""``python -m workers``: same as ``tutti worker``."""

import sys

from tuttiml.workers.runner import main

if __name__ == "__main__":
    sys.exit(main())
