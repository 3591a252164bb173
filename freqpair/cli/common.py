"""What the command-line subcommands share: SI values and ``KEY=SPEC`` options,
the progress bar, the executor named by ``--scheduler``, one JSON object out."""
from __future__ import annotations

import json
import sys
from typing import Callable

from freqpair.design.errors import FreqpairError
from freqpair.design.quantities import parse_si

__all__ = ["CliError", "add_optional_design", "key_spec", "add_scheduler_option", "executor_from", "run_with_progress",
           "print_json"]


class CliError(FreqpairError, ValueError):
    """A bad command-line value (names the option and the value)."""


def _num(text: str, option: str) -> float:
    """An SI value from the command line (``"2p"``, ``"1 mA"``); a CliError names ``option``."""
    try:
        return parse_si(text.strip(), field=option)
    except FreqpairError as exc:
        raise CliError(f"{option} = {text!r}: {exc}") from None


def key_spec(text: str, option: str, expected: str) -> tuple[str, str]:
    """``KEY=SPEC`` → ``(key, spec)`` (key stripped); without ``=`` a CliError
    ``"{option} {text!r}: expected {expected}"``."""
    if "=" not in text:
        raise CliError(f"{option} {text!r}: expected {expected}")
    key, spec = text.split("=", 1)
    return key.strip(), spec


def _progress(total: int, desc: str, show: bool | None = None):
    """A tqdm bar on stderr — on a terminal, or as ``show`` says; returns (callback, close)."""
    if not (sys.stderr.isatty() if show is None else show):
        return None, (lambda: None)
    from tqdm import tqdm
    bar = tqdm(total=total, desc=desc, file=sys.stderr, leave=False)
    return bar.update, bar.close


def executor_from(args):
    """The executor named by ``--scheduler`` (None: this process)."""
    address = getattr(args, "scheduler", None)
    if not address:
        return None
    from freqpair.studies.executors import DaskExecutor
    return DaskExecutor(address)


def add_scheduler_option(p) -> None:
    """``--scheduler tcp://HOST:PORT``: run the chunks on a Dask cluster."""
    p.add_argument("--scheduler", metavar="ADDRESS",
                   help="run on a Dask cluster at this scheduler address (tcp://host:8786); "
                        'needs pip install "freqpair[cluster]"')


def _with_executor(args, run):
    ex = executor_from(args)
    try:
        return run(ex)
    finally:
        if ex is not None:
            ex.close()


def run_with_progress(args, total: int, desc: str, run: Callable, show: bool | None = None):
    """``run(executor, progress)`` on the executor named by ``--scheduler`` (closed
    after), with a progress bar over ``total`` items (see :func:`_progress`)."""
    cb, close = _progress(total, desc, show)
    try:
        return _with_executor(args, lambda ex: run(ex, cb))
    finally:
        close()


def print_json(obj) -> None:
    """One JSON object on stdout (NaN refused: undefined values are null)."""
    sys.stdout.write(json.dumps(obj, allow_nan=False) + "\n")


def _load(path):
    """The design at ``path``, or the built-in example when ``path`` is None."""
    from freqpair.design.files import BUILTIN_EXAMPLE, design_from_text, load_design
    if path is None:
        return design_from_text(BUILTIN_EXAMPLE, origin="built-in example")
    return load_design(path)


def add_optional_design(p) -> None:
    """The positional DESIGN of a subcommand that falls back to the built-in example."""
    p.add_argument("design", nargs="?", help="design file (TOML); omit for the built-in example")
