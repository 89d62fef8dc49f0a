"""`python -m warranty_forecast` is the same as the `warranty-forecast` command."""

from warranty_forecast.cli import main

raise SystemExit(main())
