"""``freqpair app [DESIGN.toml] [--port N] [--procs N] [--no-browser]``: the browser explorer.

Starts a Bokeh server on 127.0.0.1 serving the explorer directory app that
ships inside the package (:func:`freqpair.app.app_dir`), with the design
(or the built-in example) shown first. Ctrl-C (or SIGTERM) stops it cleanly.

With ``--procs N`` (N > 1) the process forks N server processes that share
the listening socket; each browser session lives in the process that accepted
its connection, so N sessions' changes are computed at once instead of one
after another. The first process stays as their supervisor: it restarts a
server process that dies and passes Ctrl-C or SIGTERM on to all of them.
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


def make_server(design_path: str | None = None, port: int = 5006, procs: int = 1):
    """A Bokeh server (not started) serving the explorer at ``http://127.0.0.1:port/``.

    Parameters
    ----------
    design_path : str, optional
        Design file shown first (absolute path recommended); None: built-in example.
    port : int
        TCP port on the loopback interface (0 is not accepted; pick a free one).
    procs : int
        Server processes. With more than one this call forks: it returns in
        each server process, while the calling process stays inside it as
        their supervisor until they have all exited (then raises SystemExit).

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
    return Server({"/": app}, address=HOST, port=port, num_procs=procs,
                  allow_websocket_origin=[f"{HOST}:{port}", f"localhost:{port}"],
                  websocket_max_message_size=WEBSOCKET_MAX_BYTES)


def _children(pid: int) -> list[int]:
    """Process ids whose parent is ``pid`` (from /proc; empty where there is none)."""
    out = []
    try:
        names = os.listdir("/proc")
    except OSError:
        return out
    for name in names:
        if not name.isdigit():
            continue
        try:
            with open(f"/proc/{name}/stat") as fh:
                fields = fh.read().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if int(fields[1]) == pid:
            out.append(int(name))
    return out


def _supervise_signals() -> None:
    """In the supervising process: pass SIGINT and SIGTERM on to the server processes.

    A server process inherits this handler until it installs its own (right
    after the fork); there it stops the process.
    """
    supervisor = os.getpid()

    def forward(sig, frame):
        if os.getpid() != supervisor:
            raise SystemExit(0)
        for child in _children(supervisor):
            try:
                os.kill(child, sig)
            except ProcessLookupError:
                pass

    for sig in (signal.SIGINT, signal.SIGTERM):
        signal.signal(sig, forward)


def cmd_app(args) -> int:
    from freqpair.design.files import load_design
    from freqpair.design.errors import DesignError
    path = None
    if args.design:
        load_design(args.design)            # a bad file: one line, before any server starts
        path = os.path.abspath(args.design)
    if not 1 <= args.port <= 65535:
        raise DesignError(f"--port = {args.port}: must be between 1 and 65535")
    procs = args.procs
    if not 1 <= procs <= 64:
        raise DesignError(f"--procs = {procs}: must be between 1 and 64")
    if procs > 1 and not hasattr(os, "fork"):
        raise DesignError(f"--procs = {procs}: this system cannot fork server processes")
    limit_blas_threads()
    if procs > 1:
        _supervise_signals()
        # the explorer's modules (Bokeh, NumPy, SciPy, freqpair) loaded once before
        # the fork: the server processes share their pages instead of each loading them
        import freqpair.app.view  # noqa: F401
        import freqpair.app.panels  # noqa: F401
    try:
        server = make_server(path, args.port, procs)
    except OSError as exc:
        raise DesignError(f"--port = {args.port}: cannot listen on {HOST} "
                          f"({exc.strerror or exc})") from None
    except SystemExit:                       # the supervisor: every server process ended
        print("freqpair explorer stopped", file=sys.stderr, flush=True)
        return 0
    from tornado.process import task_id
    first = task_id() in (None, 0)           # one line for the user, not one per process
    # Ctrl-C (SIGINT) and SIGTERM stop the loop from inside the loop (asyncio's signal handling)
    for sig in (signal.SIGINT, signal.SIGTERM):
        server.io_loop.asyncio_loop.add_signal_handler(sig, server.io_loop.stop)
    server.start()
    url = f"http://{HOST}:{args.port}/"
    if first:
        many = f", {procs} server processes" if procs > 1 else ""
        print(f"freqpair explorer at {url}  (Ctrl-C stops it{many})", flush=True)
    if not args.no_browser and first:
        server.io_loop.add_callback(server.show, "/")
    try:
        server.io_loop.start()
    except KeyboardInterrupt:
        pass
    finally:
        server.stop()
    if procs == 1:
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
    p.add_argument("--procs", type=int, default=1, metavar="N",
                   help="server processes sharing the port (default 1); sessions are "
                        "spread over them, so N sessions' changes are computed at once")
    p.add_argument("--no-browser", action="store_true", help="do not open a browser")
    p.set_defaults(func=cmd_app)
