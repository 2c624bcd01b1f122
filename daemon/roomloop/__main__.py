"""``python -m roomloop`` runs the command line."""

from roomloop.cli import main

raise SystemExit(main())
