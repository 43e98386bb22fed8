"""Command line of tipledger: ``tipledger COMMAND --help`` for each command.

Bad input ends with a one-paragraph message and exit status 2, without a
traceback.
"""

from __future__ import annotations

import sys

from curation.cli import (  # noqa: F401  (each module registers its commands)
    bundle_commands,
    demo_commands,
    diagnostics_commands,
    import_commands,
    names_commands,
    store_commands,
    trait_commands,
    trait_import_commands,
    tree_commands,
)
from curation.cli.app import app, console
from curation.errors import TipledgerError

__all__ = ["app", "main"]


def main() -> None:
    """Run the command line; exit 2 with a clear message on bad input."""
    try:
        # Not standalone, so that our own errors reach the handler below; a
        # command's ``Exit(code)`` then comes back as its return value.
        result = app(standalone_mode=False)
    except TipledgerError as exc:
        console.print(f"Error: {exc.describe()}", markup=False, style="bold red")
        sys.exit(2)
    except SystemExit:
        raise
    except Exception as exc:
        # The command-line parser's own usage errors (wrong option, missing
        # argument) know how to show themselves and their exit status.
        show = getattr(exc, "show", None)
        code = getattr(exc, "exit_code", None)
        if callable(show) and isinstance(code, int):
            show()
            sys.exit(code)
        if isinstance(code, int):
            sys.exit(code)
        raise
    if isinstance(result, int) and result:
        sys.exit(result)
