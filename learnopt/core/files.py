"""Writing files so that nothing is ever half-written: a temporary file, then a rename."""
from __future__ import annotations

import hashlib
import json
import os
import stat
import tempfile

import numpy as np

from learnopt.core.errors import DataError, OutputError


def _umask() -> int:
    """The process's umask (read by setting it and putting it back)."""
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def not_writable(path) -> str | None:
    """Why ``path`` cannot take an output (None when it can): learnopt writes only to new paths
    and regular files, never onto a folder, a device, a pipe, a socket or a symbolic link (the
    rename would replace it), nor below something that is not a folder."""
    path = os.path.abspath(os.fspath(path))
    try:
        mode = os.lstat(path).st_mode
    except (FileNotFoundError, NotADirectoryError):
        mode = None
    if mode is not None and not stat.S_ISREG(mode):
        what = ("a folder" if stat.S_ISDIR(mode) else "a symbolic link" if stat.S_ISLNK(mode)
                else "a device" if stat.S_ISCHR(mode) or stat.S_ISBLK(mode) else "a named pipe" if stat.S_ISFIFO(mode)
                else "a socket" if stat.S_ISSOCK(mode) else "not a regular file")
        return f"{path!r} is {what}; learnopt writes only to regular files or new paths: name a file there instead"
    folder = os.path.dirname(path)
    while folder and not os.path.lexists(folder):
        folder = os.path.dirname(folder)
    if folder and not os.path.isdir(folder):
        return f"{path!r} lies below {folder!r}, which is not a folder: name a path in a folder"
    return None


def write_atomic(path, text) -> None:
    """Write ``text`` to ``path`` via a temporary file in the same folder renamed into place;
    on any failure (an interruption included) neither a partial file nor the temporary remains.
    ``text`` may also be an iterable of str/bytes chunks (written one after the other, so a
    large output never has to be whole in memory). An existing ``path`` that is not a regular
    file (a folder, a device such as /dev/null, a pipe, a socket, a link) is refused with
    :class:`OutputError`, not replaced."""
    path = os.fspath(path)
    why = not_writable(path)
    if why is not None:
        raise OutputError(f"Cannot write {why}.")
    folder = os.path.dirname(os.path.abspath(path))
    if os.path.isdir(path):
        raise DataError(f"Cannot write {path!r}: it is a folder; give the path of a file to write.")
    blocking = next((p for p in _ancestors(folder) if os.path.exists(p) and not os.path.isdir(p)), None)
    if blocking is not None:
        raise DataError(f"Cannot write {path!r}: {blocking!r} is a file, where a folder is needed; choose "
                        f"another place, or move that file.")
    try:
        os.makedirs(folder, exist_ok=True)
    except PermissionError:
        raise DataError(f"Cannot write {path!r}: no permission to create the folder {folder!r}.") from None
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


def sha256_of(path, chunk: int = 2 ** 20) -> str:
    """The SHA-256 of a file, read in chunks (a large file is never held in memory)."""
    value = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(chunk), b""):
            value.update(block)
    return value.hexdigest()


def _ancestors(folder: str):
    """``folder`` and every folder above it."""
    while True:
        yield folder
        parent = os.path.dirname(folder)
        if parent == folder:
            return
        folder = parent


def json_ready(value):
    """JSON-ready copy for model files: tuples -> lists, numpy scalars -> Python numbers,
    non-finite floats -> their text ('nan', 'inf', '-inf')."""
    if isinstance(value, (list, tuple)):
        return [json_ready(v) for v in value]
    if isinstance(value, dict):
        return {str(k): json_ready(v) for k, v in value.items()}
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not np.isfinite(value):
        return repr(value)
    return value


MODEL_FORMAT = "learnopt-fit"
MODEL_SCHEMA = 2           # 2: files carry a SHA-256 digest of their content ("digest")


def digest(content: dict) -> str:
    """SHA-256 of a model file's content (every key but "digest"), in a canonical JSON form."""
    body = {k: v for k, v in content.items() if k != "digest"}
    canonical = json.dumps(json.loads(json.dumps(body)), sort_keys=True, separators=(",", ":"), ensure_ascii=True)
    return hashlib.sha256(canonical.encode("ascii")).hexdigest()


def seal(content: dict) -> dict:
    """``content`` with its digest, ready to write."""
    return {**content, "digest": digest(content)}


def intact(saved: dict) -> bool:
    """Does a model file's content still match the digest written with it? (False when the
    file has no digest: files written before schema 2 cannot be checked.)"""
    return isinstance(saved.get("digest"), str) and saved["digest"] == digest(saved)


def read_model(path) -> dict:
    """The JSON of a learnopt model file, after checking its format and schema version (the
    fields inside are checked by the reader of each kind of fit)."""
    path = os.fspath(path)
    try:
        with open(path, encoding="utf-8") as fh:
            saved = json.load(fh)
    except FileNotFoundError:
        raise DataError(f"Model file {path!r} does not exist.") from None
    except IsADirectoryError:
        raise DataError(f"Model file {path!r} is a folder; give the path of a .json model file.") from None
    except UnicodeDecodeError:
        raise DataError(f"Model file {path!r} is not UTF-8 text; it is not a learnopt model file.") from None
    except json.JSONDecodeError as exc:
        raise DataError(f"Model file {path!r} is not JSON ({exc.msg} at line {exc.lineno}).") from None
    except RecursionError:
        raise DataError(f"Model file {path!r} is nested too deeply to be a learnopt model file.") from None
    if not isinstance(saved, dict) or saved.get("format") != MODEL_FORMAT:
        raise DataError(f"{path!r} is not a learnopt model file (no \"format\": \"{MODEL_FORMAT}\").")
    version = saved.get("schema_version")
    if not isinstance(version, int) or isinstance(version, bool) or version < 1:
        raise DataError(f"Model file {path!r}: schema_version is {version!r}; it has to be a positive whole number.")
    if version > MODEL_SCHEMA:
        raise DataError(f"{path!r} was written with model-file schema {version!r}; this learnopt reads "
                        f"schema {MODEL_SCHEMA} and older. Upgrade learnopt to read it.")
    if not isinstance(saved.get("task"), dict) or not isinstance(saved["task"].get("kind"), str):
        raise DataError(f"Model file {path!r} has no task description (\"task\" with its \"kind\").")
    return saved
