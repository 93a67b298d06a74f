"""``python -m assimbench`` is the ``assimbench`` command."""

import sys

from assimbench.commands.run import main

sys.exit(main())
