"""``python -m tsunamifocus.cli``: the command line."""

import sys

from .app import main

sys.exit(main())
