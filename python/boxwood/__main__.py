"""``python -m boxwood``: the ``boxwood`` command line (see :mod:`boxwood.cli`)."""

from .cli import main

raise SystemExit(main())
