"""``python -m elopt.optimizer.cli``: the same as the ``elopt`` command."""

import sys

from elopt.optimizer.cli.main import main

sys.exit(main())
