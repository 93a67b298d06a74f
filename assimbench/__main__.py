"""``python -m assimbench`` is the ``assimbench`` command."""

import sys

from assimbench.cli import main

sys.exit(main())
