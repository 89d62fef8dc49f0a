"""`python -m pipeline` is the same as the `warranty-forecast` command."""

from pipeline.cli import main

raise SystemExit(main())
