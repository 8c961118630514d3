"""``python -m swimlab``: the command line (see :mod:`swimlab.cli`)."""

from swimlab.cli import main

raise SystemExit(main())
