"""``python -m service``: the same as the ``fanfold`` command."""

from .cli import main

raise SystemExit(main())
