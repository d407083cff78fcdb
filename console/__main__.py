"""`python -m console` is the same as the `diffdeck` command."""

from console.cli import main

raise SystemExit(main())
