"""``python -m ndrigid.demo``: the pygame demo (``--help`` for options)."""

from __future__ import annotations

import sys

from . import main

if __name__ == "__main__":
    sys.exit(main())
