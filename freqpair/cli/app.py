"""``freqpair app [DESIGN.toml] [--port N] [--no-browser]``: the browser explorer.

Starts a Bokeh server on 127.0.0.1 serving the explorer directory app that
ships inside the package (:func:`freqpair.app.app_dir`), with the design
(or the built-in example) shown first. Ctrl-C (or SIGTERM) stops it cleanly.
"""
from __future__ import annotations

import os
import signal
import sys

__all__ = ["register", "cmd_app", "make_server", "limit_blas_threads"]

HOST = "127.0.0.1"

#: Largest websocket message the server accepts [bytes]: room for a 256 kB file
#: upload (base64 grows it by 4/3) and the document messages, refusing anything
#: much larger before it is read (the default is 20 MB).
WEBSOCKET_MAX_BYTES = 2 * 1024 * 1024


def limit_blas_threads() -> bool:
    """Run BLAS single-threaded in this process (the app's matrices are small:
    worker threads only add wake-up latency). Returns False if unavailable."""
    try:
        from threadpoolctl import threadpool_limits
    except ImportError:
        return False
    threadpool_limits(limits=1, user_api="blas")
    return True


def make_server(design_path: str | None = None, port: int = 5006):
    """A Bokeh server (not started) serving the explorer at ``http://127.0.0.1:port/``.

    Parameters
    ----------
    design_path : str, optional
        Design file shown first (absolute path recommended); None: built-in example.
    port : int
        TCP port on the loopback interface (0 is not accepted; pick a free one).

    Returns
    -------
    bokeh.server.server.Server
    """
    from bokeh.application import Application
    from bokeh.application.handlers import DirectoryHandler
    from bokeh.server.server import Server

    from freqpair.app import app_dir
    argv = [design_path] if design_path else []
    app = Application(DirectoryHandler(filename=str(app_dir()), argv=argv))
    return Server({"/": app}, address=HOST, port=port, num_procs=1,
                  allow_websocket_origin=[f"{HOST}:{port}", f"localhost:{port}"],
                  websocket_max_message_size=WEBSOCKET_MAX_BYTES)


def cmd_app(args) -> int:
    from freqpair.design.files import load_design
    from freqpair.design.errors import DesignError
    path = None
    if args.design:
        load_design(args.design)            # a bad file: one line, before any server starts
        path = os.path.abspath(args.design)
    if not 1 <= args.port <= 65535:
        raise DesignError(f"--port = {args.port}: must be between 1 and 65535")
    limit_blas_threads()
    try:
        server = make_server(path, args.port)
    except OSError as exc:
        raise DesignError(f"--port = {args.port}: cannot listen on {HOST} "
                          f"({exc.strerror or exc})") from None
    # Ctrl-C (SIGINT) and SIGTERM stop the loop from inside the loop (asyncio's signal handling)
    for sig in (signal.SIGINT, signal.SIGTERM):
        server.io_loop.asyncio_loop.add_signal_handler(sig, server.io_loop.stop)
    server.start()
    url = f"http://{HOST}:{args.port}/"
    print(f"freqpair explorer at {url}  (Ctrl-C stops it)", flush=True)
    if not args.no_browser:
        server.io_loop.add_callback(server.show, "/")
    try:
        server.io_loop.start()
    except KeyboardInterrupt:
        pass
    finally:
        server.stop()
    print("freqpair explorer stopped", file=sys.stderr, flush=True)
    return 0


def register(sub) -> None:
    """Add the ``app`` subcommand to the CLI's subparsers."""
    p = sub.add_parser("app", help="interactive explorer in the browser",
                       description="Serve the interactive explorer on 127.0.0.1 and open it "
                                   "in the browser. With no DESIGN, the built-in example.")
    from freqpair.cli.common import add_optional_design
    add_optional_design(p)
    p.add_argument("--port", type=int, default=5006, help="TCP port (default 5006)")
    p.add_argument("--no-browser", action="store_true", help="do not open a browser")
    p.set_defaults(func=cmd_app)
