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
        app(standalone_mode=False)
    except TipledgerError as exc:
        console.print(f"Error: {exc.describe()}", markup=False, style="bold red")
        sys.exit(2)
    except SystemExit:
        raise
    except Exception as exc:  # click's own usage errors
        from click.exceptions import ClickException, Exit

        if isinstance(exc, Exit):
            sys.exit(exc.exit_code)
        if isinstance(exc, ClickException):
            exc.show()
            sys.exit(exc.exit_code)
        raise
