"""``python -m popmeter`` runs the command line."""

from popmeter.cli import main

raise SystemExit(main())
