"""``python -m boxwood.cli``: the ``boxwood`` command line, as ``python -m boxwood``."""

from . import main

raise SystemExit(main())
