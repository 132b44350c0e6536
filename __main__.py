"""``python -m recharge_atlas`` runs the command-line interface."""

from recharge_atlas.cli import main

raise SystemExit(main())
