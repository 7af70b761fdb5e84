"""Allow ``python -m rigloop``."""

from rigloop.cli import main

raise SystemExit(main())
