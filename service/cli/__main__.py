"""``python -m service.cli``: the same as the ``plumbline`` command."""

import sys

from . import main

sys.exit(main())
