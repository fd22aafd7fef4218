"""``python -m <plugin folder>.algorithms.cluster``: the engine's command line (:mod:`.cli`)."""
from .cli import main

raise SystemExit(main())
