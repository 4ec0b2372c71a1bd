"""Writing files so that nothing is ever half-written: a temporary file, then a rename."""
from __future__ import annotations

import os
import tempfile


def write_atomic(path, text) -> None:
    """Write ``text`` to ``path`` via a temporary file in the same folder renamed into place;
    on any failure (an interruption included) neither a partial file nor the temporary remains.
    ``text`` may also be an iterable of str/bytes chunks (written one after the other, so a
    large output never has to be whole in memory)."""
    path = os.fspath(path)
    folder = os.path.dirname(os.path.abspath(path))
    os.makedirs(folder, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=folder, prefix=".learnopt-", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as fh:
            for chunk in ([text] if isinstance(text, (str, bytes)) else text):
                fh.write(chunk.encode("utf-8") if isinstance(chunk, str) else chunk)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
