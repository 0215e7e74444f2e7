"""Allows `python -m mobile.cli`."""

import sys

from mobile.cli import main

sys.exit(main())
