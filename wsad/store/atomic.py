"""Writing a new store all at once: built in a hidden folder beside its target and
renamed into place when complete, so an interrupted write leaves nothing half-made."""
from __future__ import annotations

import json
import os
import shutil
import tempfile
from contextlib import contextmanager
from pathlib import Path

from ..errors import WsadError
from .format import FORMAT_VERSION


def refuse_existing(out: Path, flag: str, tool: str) -> None:
    if out.exists() and (not out.is_dir() or any(out.iterdir())):
        raise WsadError(f"{flag} {out} exists and is not empty; choose a new folder "
                        f"({tool} never overwrites)")


@contextmanager
def new_store_dir(out: Path, flag: str, tool: str):
    """Yields a temporary folder (with ``features/``) that becomes ``out`` on success."""
    out = Path(out)
    refuse_existing(out, flag, tool)
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.", dir=out.parent))
    try:
        (tmp / "features").mkdir()
        yield tmp
        if out.exists():
            out.rmdir()
        os.replace(tmp, out)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise


def write_store_json(root: Path, dim: int, segment_frames: int, description: str, **extra) -> None:
    meta = {"format": FORMAT_VERSION, "dim": int(dim), "segment_frames": int(segment_frames),
            "description": description, **extra}
    (Path(root) / "store.json").write_text(json.dumps(meta, indent=2, sort_keys=True) + "\n")
