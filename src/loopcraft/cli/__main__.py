"""``python -m loopcraft.cli``: the same as the ``loopcraft`` command."""

import sys

from .main import main

sys.exit(main())
