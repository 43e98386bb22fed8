"""Command line of tipledger: ``tipledger COMMAND --help`` for each command.

Bad input ends with a one-paragraph message and exit status 2, without a
traceback: our own errors, and the command-line parser's (a value not among
an option's choices, a missing argument, an unknown option) alike.
"""

from __future__ import annotations

import shlex
import sys
from typing import Any, NoReturn

# The parser's usage errors: Typer's own copy of Click (typer>=0.29).
from typer._click.exceptions import NoArgsIsHelpError, UsageError

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
from curation.errors import InputError, TipledgerError, choice_error

__all__ = ["app", "main", "usage_error"]


def _choices(param: Any) -> tuple[str, ...] | None:
    """The values an option or argument takes, as its help shows them."""
    descriptor = getattr(param, "type_descriptor", None)
    choices = getattr(descriptor, "choices", None)
    if not choices:
        return None
    return tuple(str(getattr(c, "value", c)) for c in choices)


def _rejected(exc: UsageError) -> tuple[bool, object]:
    """Whether the value the parser refused is known, and that value."""
    # Typer validates a value with pydantic and raises from its error,
    # which keeps the value as given.
    errors = getattr(exc.__cause__, "errors", None)
    if callable(errors):
        found = errors()
        if found and "input" in found[0]:
            return True, found[0]["input"]
    return False, None


def usage_error(exc: UsageError) -> InputError:
    """Return the parser's usage error as our own :class:`InputError`.

    A value not among an option's choices gets the message the library
    gives for such a value (every allowed value listed), naming the
    option; any other usage error keeps the parser's message. The hint
    points at the command's ``--help``.
    """
    ctx = exc.ctx
    path = ctx.command_path if ctx is not None else "tipledger"
    see = f"see `{path} --help`"
    param = getattr(exc, "param", None)
    choices = _choices(param)
    known, value = _rejected(exc)
    if choices and known:
        opts = [o for o in getattr(param, "opts", []) if o.startswith("-")]
        name = max(opts, key=len) if opts else str(getattr(param, "name", "value")).upper()
        example = f"{name} {shlex.quote(choices[0])}" if opts else shlex.quote(choices[0])
        return choice_error(
            value, choices, field=name, hint=f"give one of them, e.g. {example}; {see}"
        )
    usage = ctx.get_usage() if ctx is not None else ""
    hint = f"{usage[0].lower()}{usage[1:]}; {see}" if usage else see
    return InputError(exc.format_message(), hint=hint)


def _fail(exc: TipledgerError) -> NoReturn:
    console.print(f"Error: {exc.describe()}", markup=False, style="bold red")
    sys.exit(2)


def main() -> None:
    """Run the command line; exit 2 with a clear message on bad input."""
    try:
        # Not standalone, so that our own errors reach the handler below; a
        # command's ``Exit(code)`` then comes back as its return value.
        result = app(standalone_mode=False)
    except TipledgerError as exc:
        _fail(exc)
    except NoArgsIsHelpError as exc:
        exc.show()  # the command's help, for a command given no arguments
        sys.exit(exc.exit_code)
    except UsageError as exc:
        _fail(usage_error(exc))
    except SystemExit:
        raise
    except Exception as exc:
        # The parser's other errors (a file it cannot open, an abort) know
        # how to show themselves and their exit status.
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
