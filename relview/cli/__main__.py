"""``python -m relview.cli``: the ``relview`` command."""

import sys

from relview.cli.app import main

sys.exit(main())
