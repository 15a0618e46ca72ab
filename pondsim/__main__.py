"""Allow ``python -m pondsim``."""

from .cli import main

raise SystemExit(main())
