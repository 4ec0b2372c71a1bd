"""The dask cluster a sharded fit runs on.

``solve(client=...)`` takes a ``distributed.Client`` or a scheduler address; with none, dask's
current default client is used, and failing that a local cluster that learnopt starts once per
process (one single-threaded worker process per core, up to 4) and closes at exit.
"""
from __future__ import annotations

import atexit
from dataclasses import dataclass
import os
import socket

from learnopt.core.checks import refusal
from learnopt.core.errors import MissingDependencyError, ParameterError
from learnopt.data.sharded import need_dask

_LOCAL: dict = {}
CONNECT_SECONDS = 5.0      # how long a scheduler address may take to answer


def reachable(address: str, seconds: float) -> None:
    """Fail fast (OSError) when nothing listens at a ``tcp://host:port`` scheduler address;
    other protocols are left to the client."""
    plain = address.split("://", 1)[1] if "://" in address else address
    if address.startswith(("tcp://", "tls://")) or "://" not in address:
        host, _, port = plain.rpartition(":")
        if not port.isdigit():
            raise ValueError("no port in the address; write it as tcp://host:port, e.g. tcp://127.0.0.1:8786")
        with socket.create_connection((host.strip("[]") or "127.0.0.1", int(port)), timeout=seconds):
            pass


def connect(client=None):
    """The distributed Client to use: the one given, a scheduler address, dask's default, or a
    local cluster learnopt starts (once per process)."""
    need_dask()
    try:
        from distributed import Client, LocalCluster, default_client
    except ImportError as exc:
        raise MissingDependencyError("Sharded fits need distributed: pip install 'learnopt[scale]'.") from exc
    if isinstance(client, Client):
        return client
    if isinstance(client, str):
        key = ("address", client)
        if key not in _LOCAL:
            try:
                reachable(client, CONNECT_SECONDS)
                _LOCAL[key] = Client(client, set_as_default=False, timeout=CONNECT_SECONDS)
            except (OSError, TimeoutError, ValueError) as exc:
                raise ParameterError(f"No dask scheduler answered at {client!r} within {CONNECT_SECONDS:g} s "
                                     f"({str(exc).splitlines()[0][:160] or type(exc).__name__}); check the address "
                                     f"and that the scheduler runs, or leave client=None for a local "
                                     f"cluster.") from None
        return _LOCAL[key]
    if client is not None:
        raise refusal("solve", "client", client, "a distributed.Client, a scheduler address (text) or None")
    try:
        return default_client()
    except ValueError:
        pass
    if "local" not in _LOCAL:
        workers = max(1, min(os.cpu_count() or 1, 4))
        try:
            cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                   dashboard_address=":0", silence_logs=50)
        except (RuntimeError, OSError, TimeoutError) as exc:
            raise ParameterError(
                f"learnopt could not start a local dask cluster ({str(exc).splitlines()[0]}). Worker "
                f"processes import the script that starts them: put a script's work under "
                f"'if __name__ == \"__main__\":', or pass client= an existing distributed.Client or "
                f"scheduler address.") from None
        _LOCAL["local"] = Client(cluster, set_as_default=False)
        atexit.register(close_local)
    return _LOCAL["local"]


def close_local() -> None:
    """Close the clusters and connections learnopt opened itself."""
    for key in list(_LOCAL):
        client = _LOCAL.pop(key)
        cluster = client.cluster if key == "local" else None
        client.close()
        if cluster is not None:
            cluster.close()


@dataclass(frozen=True)
class ClusterSettings:
    """Where and how a sharded fit runs; only the scale layer and the sharded route read it.

    client : a ``distributed.Client``, a scheduler address, or None (dask's current client, else
        a local cluster learnopt starts); progress : a line per round of passes (None: only on a
        terminal); method : "gram", "newton" or "admm" (None: chosen from the loss).
    """

    client: object = None
    progress: bool | None = None
    method: str | None = None
