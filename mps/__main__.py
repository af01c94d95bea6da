"""``python -m mps`` runs the command line."""

from mps.cli import main

raise SystemExit(main())
