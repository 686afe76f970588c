"""``python -m app.cli``: the ``wakeline`` command."""

import sys

from app.cli import main

sys.exit(main())
