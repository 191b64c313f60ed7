"""Allow ``python -m simcheck``."""

from simcheck.cli import main

raise SystemExit(main())
