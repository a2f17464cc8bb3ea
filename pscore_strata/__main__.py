"""Allow ``python -m pscore_strata``."""

from .cli import main

raise SystemExit(main())
