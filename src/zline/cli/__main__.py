"""``python -m zline.cli``: the ``zline`` command."""

import sys

from zline.cli import main

sys.exit(main())
