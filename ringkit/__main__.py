"""Allow ``python -m ringkit``."""

from ringkit.cli import main

raise SystemExit(main())
