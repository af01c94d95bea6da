"""``python -m mps`` runs the command line."""

from mps.pipeline.cli import main

raise SystemExit(main())
