"""``python -m sweep``: the same as the ``sweep`` command."""

from sweep.cli import main

raise SystemExit(main())
