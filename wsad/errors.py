"""One exception type for problems the user can fix, and the CLI wrapper that
turns it into one clear line and a non-zero exit."""
from __future__ import annotations

import os
import sys
import traceback
from typing import Callable


class WsadError(Exception):
    """A problem with the user's input or configuration.

    The message names the thing and says what to do; the CLI prints it as
    one line (no traceback unless ``WSAD_DEBUG=1``).
    """

    exit_code = 2


def run_cli(fn: Callable[[], int | None], prog: str) -> None:
    """Run a console entry point; map errors to one line and an exit code."""
    debug = os.environ.get("WSAD_DEBUG", "") not in ("", "0")
    try:
        code = fn()
    except WsadError as err:
        if debug:
            traceback.print_exc()
        print(f"{prog}: error: {err}", file=sys.stderr)
        sys.exit(err.exit_code)
    except KeyboardInterrupt:
        print(f"{prog}: interrupted", file=sys.stderr)
        sys.exit(130)
    except Exception as err:  # an unexpected failure: still one line by default
        if debug:
            traceback.print_exc()
        print(f"{prog}: internal error: {type(err).__name__}: {err} "
              "(set WSAD_DEBUG=1 for the traceback)", file=sys.stderr)
        sys.exit(1)
    sys.exit(int(code or 0))
