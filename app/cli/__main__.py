"""``python -m app.cli``: the same command as ``landlift``."""

from app.cli.main import main

raise SystemExit(main())
