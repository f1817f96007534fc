from __future__ import annotations

from tuikiln.cli import main

raise SystemExit(main())
