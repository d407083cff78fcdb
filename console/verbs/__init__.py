"""One module per `diffdeck` verb. Each module defines:

- `NAME` (the verb), `HELP` (one line), `ORDER` (position in the help listing),
- `add_arguments(parser: argparse.ArgumentParser) -> None`,
- `run(args: argparse.Namespace) -> int` (the exit code).

`console.cli` discovers them, so adding a verb touches no shared file.
"""
