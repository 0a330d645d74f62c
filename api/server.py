"""``corealign serve``: the service on a production WSGI server (waitress).

Settings are checked before anything starts; errors that waitress answers itself (a body over
the size limit, a malformed request line) are problem details like every other; SIGTERM and
Ctrl-C stop the server and its worker processes.
"""

from __future__ import annotations

import math
from pathlib import Path

from align.errors import InputError

#: Bytes a request body may exceed ``MAX_CONTENT_LENGTH`` by (multipart framing) before
#: waitress refuses it without reading it.
FRAMING = 1_000_000


#: The least worker memory limit (MiB): a worker holds about 450 MB of data once its
#: libraries are loaded and the demo's computations have run (measured).
MIN_WORKER_MEMORY = 512


#: Resident memory (MiB) of the server process with multiprocessing's resource tracker
#: (waitress, Flask and the libraries the routes import: about 190 MB measured) and, per
#: worker, beyond its memory limit (shared libraries and code, which ``RLIMIT_DATA`` does not
#: count: about 140 MB measured).
SERVER_MEMORY, WORKER_CODE = 512, 256


def peak_memory(workers, worker_memory):
    """The bound (bytes) of the service's peak resident memory: the server process and each
    worker at its memory limit, ``SERVER_MEMORY + workers * (worker_memory + WORKER_CODE)``
    MiB (``worker_memory`` in bytes; None when a worker's memory is not limited)."""
    if worker_memory is None:
        return None
    return SERVER_MEMORY * 2**20 + workers * (int(worker_memory) + WORKER_CODE * 2**20)


def check_settings(port, workers, time_limit, threads, worker_memory=None):
    """Refuse settings the server cannot run with, naming the option (``worker_memory`` in
    MiB)."""
    checks = [
        ("port", port, isinstance(port, int) and 1 <= port <= 65535, "a port from 1 to 65535"),
        ("workers", workers, workers is None or (isinstance(workers, int) and 1 <= workers <= 64),
         "a number of worker processes from 1 to 64"),
        ("time-limit", time_limit, time_limit is None or (math.isfinite(time_limit)
                                                        and 0 < time_limit <= 86_400),
         "seconds above 0, at most 86400"),
        ("threads", threads, isinstance(threads, int) and 1 <= threads <= 256,
         "a number of request threads from 1 to 256"),
        ("worker-memory", worker_memory, worker_memory is None or (
            math.isfinite(worker_memory) and MIN_WORKER_MEMORY <= worker_memory <= 2**20),
         f"MiB from {MIN_WORKER_MEMORY} to 1048576 (1 TiB)"),
    ]
    for name, value, ok, what in checks:
        if not ok:
            raise InputError(f"must be {what} (got {value!r})", field=name)


def serve(host="127.0.0.1", port=8750, data_dir=None, token_file=None, workers=None,
          time_limit=None, threads=8, worker_memory=None):
    """Serve the app until interrupted (Ctrl-C) or terminated (SIGTERM).

    Parameters
    ----------
    host, port : str, int
        Where to listen (loopback by default; on a loopback address only the loopback host
        names are answered).
    data_dir : str, optional
        The store folder (default: :func:`api.default_data_dir`).
    token_file : str, optional
        A file holding the bearer token that computing and storing routes, and reads (unless
        ``TOKEN_READS`` is off), require.
    workers : int, optional
        Computation worker processes, 1 to 64 (default 2).
    time_limit : float, optional
        Seconds a computation may run before it is stopped, above 0 (default 300).
    threads : int
        Request threads of the WSGI server.
    worker_memory : float, optional
        MiB of data each worker may hold (``WORKER_MEMORY``), at least 512 (default 4096); a
        computation that needs more is answered 413.
    """
    check_settings(port, workers, time_limit, threads, worker_memory)
    from api import create_app, default_data_dir
    from api.guard import LOOPBACK

    config = {"DATA_DIR": str(Path(data_dir) if data_dir else default_data_dir())}
    if token_file:
        config["TOKEN"] = read_token(token_file)
    if workers is not None:
        config["WORKERS"] = workers
    if time_limit is not None:
        config["TIME_LIMIT"] = time_limit
    if worker_memory is not None:
        config["WORKER_MEMORY"] = int(worker_memory * 2**20)
    if host in LOOPBACK or host.startswith("127."):
        config["ALLOWED_HOSTS"] = (*LOOPBACK, host)
    app = create_app(config)
    server = _server(app, host, port, threads)
    bound = peak_memory(app.config["WORKERS"], app.config["WORKER_MEMORY"])
    memory = f"; memory at most {bound / 2**30:.1f} GiB" if bound else ""
    print(f"corealign service on http://{host}:{port} (data in {config['DATA_DIR']}{memory})",
          flush=True)
    _run(server)


def read_token(token_file):
    try:
        token = Path(token_file).read_text().strip()
    except OSError as exc:
        raise InputError(f"cannot read the token file ({exc.strerror})", source=token_file,
                         field="token-file") from None
    if not token:
        raise InputError("the token file is empty", source=token_file, field="token-file")
    return token


def _server(app, host, port, threads):
    from waitress import create_server

    try:
        server = create_server(app, host=host, port=port, threads=threads, ident="corealign",
                               max_request_body_size=app.config["MAX_CONTENT_LENGTH"] + FRAMING)
    except OSError as exc:
        raise InputError(f"cannot listen on {host}:{port} ({exc.strerror})",
                         field="port") from None
    server.channel_class = _problem_channel()
    return server


def _problem_channel():
    """A waitress channel whose own error answers are problem details."""
    import json

    from waitress.channel import HTTPChannel
    from waitress.task import ErrorTask

    from api.problems import CONTENT_TYPE, TYPES

    class ProblemErrorTask(ErrorTask):
        def execute(self):
            error = self.request.error
            body = json.dumps({
                "type": f"tag:corealign,2026:problem/{TYPES.get(error.code, 'error')}",
                "title": error.reason, "status": error.code,
                "detail": str(error.body)}).encode()
            self.status = f"{error.code} {error.reason}"
            self.response_headers.append(("Content-Type", CONTENT_TYPE))
            self.set_close_on_finish()
            self.content_length = len(body)
            self.write(body)

    class ProblemChannel(HTTPChannel):
        error_task_class = ProblemErrorTask

    return ProblemChannel


def _run(server):
    """Run until SIGINT or SIGTERM; then close the sockets and stop the workers. SIGTERM ends
    with exit code 143 (waitress's loop returns quietly on either signal)."""
    import signal

    from api.compute import shutdown

    stopped = []

    def stop(signum, frame):
        stopped.append(signum)
        raise SystemExit(128 + signum)

    previous = signal.signal(signal.SIGTERM, stop)
    try:
        server.run()
    except KeyboardInterrupt:
        pass
    finally:
        signal.signal(signal.SIGTERM, previous)
        server.close()
        shutdown()
    if stopped:
        raise SystemExit(128 + stopped[0])
