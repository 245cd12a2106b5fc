"""``python -m service.cli``: the same as the ``veramp`` command."""

import sys

from . import main

sys.exit(main())
