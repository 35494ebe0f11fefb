"""``python -m observer_app`` is the ``fieldmark`` command."""
from observer_app.cli import main

raise SystemExit(main())
