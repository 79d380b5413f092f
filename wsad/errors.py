"""One exception type for problems the user can fix, and the one wrapper that
turns it into one clear line and a non-zero exit for every console script."""
from __future__ import annotations

import os
import sys
import traceback
from collections.abc import Callable
from typing import Any


class WsadError(Exception):
    """A problem with the user's input or configuration.

    The message names the thing and says what to do; the CLI prints it as
    one line (no traceback unless ``WSAD_DEBUG=1``).
    """

    exit_code = 2


def debugging() -> bool:
    return os.environ.get("WSAD_DEBUG", "") not in ("", "0")


def one_line_warnings(prog: str) -> Callable:
    """Show every warning as one readable line, ``PROG: warning: message``; returns the
    formatter it replaced."""
    import warnings

    before = warnings.formatwarning
    warnings.formatwarning = lambda message, category, filename, lineno, line=None: f"{prog}: warning: {message}\n"
    return before


def guarded(fn: Callable[[], Any], prog: str) -> Any:
    """Call ``fn``; a failure becomes one line on stderr and ``sys.exit``.

    A :class:`WsadError` exits with its own code (2 for input problems; an
    interrupted run uses 128 + signal and is not called an error), Ctrl-C
    with 130, anything unexpected with 1. ``WSAD_DEBUG=1`` adds the traceback.
    Warnings show as one line each (:func:`one_line_warnings`).
    """
    import warnings

    before = one_line_warnings(prog)
    try:
        return fn()
    except WsadError as err:
        if debugging():
            traceback.print_exc()
        print(f"{prog}: {'error: ' if err.exit_code == 2 else ''}{err}", file=sys.stderr)
        sys.exit(err.exit_code)
    except KeyboardInterrupt:
        print(f"{prog}: interrupted", file=sys.stderr)
        sys.exit(130)
    except Exception as err:  # an unexpected failure: still one line by default
        if debugging():
            traceback.print_exc()
        print(f"{prog}: internal error: {type(err).__name__}: {err} "
              "(set WSAD_DEBUG=1 for the traceback)", file=sys.stderr)
        sys.exit(1)
    finally:
        warnings.formatwarning = before


def run_cli(fn: Callable[[], int | None], prog: str) -> None:
    """Run a console entry point and exit with its code (see :func:`guarded`)."""
    sys.exit(int(guarded(fn, prog) or 0))
