"""``python -m edopt``: the command line (see `edopt.cli`)."""

from .cli import main

raise SystemExit(main())
