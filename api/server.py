"""``corealign serve``: the service on a production WSGI server (waitress)."""

from __future__ import annotations

from pathlib import Path

from align.errors import InputError


def serve(host="127.0.0.1", port=8750, data_dir=None, token_file=None, workers=None,
          time_limit=None, threads=8):
    """Serve the app until interrupted.

    Parameters
    ----------
    host, port : str, int
        Where to listen (loopback by default).
    data_dir : str, optional
        The store folder (default: :func:`api.default_data_dir`).
    token_file : str, optional
        A file holding the bearer token that write routes require.
    workers : int, optional
        Computation worker processes (default 2).
    time_limit : float, optional
        Seconds a computation may run before it is stopped (default 300).
    threads : int
        Request threads of the WSGI server.
    """
    from waitress import serve as waitress_serve

    from api import create_app, default_data_dir

    config = {"DATA_DIR": str(Path(data_dir) if data_dir else default_data_dir())}
    if token_file:
        try:
            token = Path(token_file).read_text().strip()
        except OSError as exc:
            raise InputError(f"cannot read the token file ({exc.strerror})", source=token_file,
                             field="token-file") from None
        if not token:
            raise InputError("the token file is empty", source=token_file, field="token-file")
        config["TOKEN"] = token
    if workers is not None:
        config["WORKERS"] = workers
    if time_limit is not None:
        config["TIME_LIMIT"] = time_limit
    app = create_app(config)
    print(f"corealign service on http://{host}:{port} (data in {config['DATA_DIR']})",
          flush=True)
    waitress_serve(app, host=host, port=port, threads=threads,
                   max_request_body_size=app.config["MAX_CONTENT_LENGTH"] + 1_000_000,
                   ident="corealign")
