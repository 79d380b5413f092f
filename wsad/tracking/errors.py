"""What a tracking failure means to the user, and retries while SQLite is busy."""
from __future__ import annotations

import os
import re
import time
from collections.abc import Callable
from typing import Any

from ..errors import WsadError


class TrackingUnavailable(WsadError):
    """The tracking server stopped answering (past the MLflow client's own HTTP retries)."""

    exit_code = 75   # EX_TEMPFAIL (sysexits.h): a temporary failure, try again later


_DOWN = ("max retries exceeded", "connection refused", "failed to establish a new connection",
         "connectionerror", "read timed out", "remotedisconnected", "connection aborted")


def read_failure(err: Exception, uri: str) -> WsadError | None:
    """What a failure of the tracking store at ``uri`` means to the user, in one line, or None
    (not a server problem). Only an HTTP server answers with a status; codes count as whole
    numbers, so a run id that happens to hold "401" is not read as a refused login."""
    if not uri.startswith(("http://", "https://")):
        return None
    text = f"{type(err).__name__}: {err}"
    low = text.lower()
    codes = set(re.findall(r"(?<![\w.:])(40[13]|50[234])(?![\w.])", low))
    user = os.environ.get("MLFLOW_TRACKING_USERNAME")
    if "401" in codes or "unauthorized" in low or "not authenticated" in low:
        who = f"the password of user {user!r}" if user else "a request without credentials"
        return WsadError(f"the tracking server at {uri} refused {who} (HTTP 401): set MLFLOW_TRACKING_USERNAME "
                         "and MLFLOW_TRACKING_PASSWORD to an account it knows")
    if "403" in codes or "permission_denied" in low:
        return WsadError(f"the tracking server at {uri} does not let user {user!r} do this (HTTP 403): ask its "
                         "admin for EDIT permission on the experiment")
    if codes & {"502", "503", "504"} or any(k in low for k in _DOWN):
        return TrackingUnavailable(f"the tracking server at {uri} does not answer ({text.splitlines()[0][:160]})")
    return None


def retry(fn: Callable[[], Any], uri: str, attempts: int = 8, delay: float = 0.25) -> Any:
    """Call fn, retrying briefly while SQLite reports the database is locked; a server at
    ``uri`` that refuses the credentials or stops answering becomes one clear :class:`WsadError`."""
    for i in range(attempts):
        try:
            return fn()
        except WsadError:
            raise
        except Exception as err:  # noqa: BLE001 - MLflow wraps the driver's error types
            if "locked" not in str(err).lower() or i == attempts - 1:
                meaning = read_failure(err, uri)
                if meaning is not None:
                    raise meaning from None
                raise
            time.sleep(delay * (2 ** i))
    return None
