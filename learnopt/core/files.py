"""Writing files so that nothing is ever half-written: a temporary file, then a rename."""
from __future__ import annotations

import os
import tempfile


def _umask() -> int:
    """The process's umask (read by setting it and putting it back)."""
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


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
        # mkstemp creates the file readable by its owner only; an output gets the permissions any
        # new file of the user's gets (0666 less the umask), or the ones the file it replaces had
        mode = os.stat(path).st_mode & 0o7777 if os.path.exists(path) else 0o666 & ~_umask()
        os.chmod(tmp, mode)
        with os.fdopen(fd, "wb") as fh:
            for chunk in ([text] if isinstance(text, (str, bytes)) else text):
                fh.write(chunk.encode("utf-8") if isinstance(chunk, str) else chunk)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
