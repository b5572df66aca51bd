"""``python -m nstress`` runs the command line."""

from nstress.workflow.cli import main

raise SystemExit(main())
