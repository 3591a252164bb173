"""Design files on disk: TOML read and written atomically, CSV text, the built-in example.

Reading validates through :func:`freqpair.design.schema.parse_design`; every
write goes to a temporary file in the same folder and is renamed into place,
so an interrupted write leaves the old file or none, never half a file.
"""
from __future__ import annotations

import csv
import io
import math
import os
import tempfile
import tomllib
from pathlib import Path
from typing import Any


from freqpair.design.errors import DesignError
from freqpair.design.schema import Design, design_to_dict, parse_design

__all__ = ["load_design", "design_from_text", "save_design", "load_design_table",
           "save_design_table", "atomic_write_text", "atomic_write_bytes", "csv_text",
           "BUILTIN_EXAMPLE"]


def design_from_text(text: str, origin: str = "<text>") -> Design:
    """Parse TOML text into a validated :class:`Design`."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise DesignError(f"{origin}: not valid TOML: {exc}") from None
    return parse_design(data)


def load_design(path: str | os.PathLike) -> Design:
    """Read and validate a design file.

    Parameters
    ----------
    path : str or path-like
        A TOML design file (DESIGN.md §3).

    Returns
    -------
    Design
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise DesignError(f"{path}: cannot read design file ({exc.__class__.__name__}: "
                          f"{getattr(exc, 'strerror', None) or exc})") from None
    return design_from_text(text, origin=str(path))


def save_design(design: Design, path: str | os.PathLike) -> None:
    """Write a design as TOML, atomically (temporary file, then rename)."""
    import tomli_w
    atomic_write_text(path, tomli_w.dumps(design_to_dict(design)))


def load_design_table(path: str | os.PathLike) -> dict[str, Any]:
    """Read a design file as the plain TOML table the user wrote (strings such as
    ``"2.2 pF"`` kept), after checking that it is a valid design."""
    path = Path(path)
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError) as exc:
        raise DesignError(f"{path}: cannot read design file ({exc.__class__.__name__})") from None
    except tomllib.TOMLDecodeError as exc:
        raise DesignError(f"{path}: not valid TOML: {exc}") from None
    parse_design(data)
    return data


def save_design_table(data: dict[str, Any], path: str | os.PathLike) -> Design:
    """Validate a design table and write it as TOML, atomically, exactly as given.

    Use this (with :func:`load_design_table`) to save a design the user edited:
    the values keep the user's own spelling (``"10 k"`` stays ``"10 k"``);
    :func:`save_design` writes SI floats instead. Nothing is written when the
    table is not a valid design.

    Returns
    -------
    Design
        The validated design.
    """
    design = parse_design(data)
    import tomli_w
    atomic_write_text(path, tomli_w.dumps(data))
    return design


def atomic_write_text(path: str | os.PathLike, text: str) -> None:
    """Write text to ``path`` via a temporary file in the same folder and a rename.

    An interrupted write leaves either the old file or none, never half a file.
    """
    atomic_write_bytes(path, text.encode("utf-8"))


def atomic_write_bytes(path: str | os.PathLike, data: bytes) -> None:
    """Bytes version of :func:`atomic_write_text`."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent or ".")
    try:
        # mkstemp creates 0600; give the file the mode a plain open() would
        # (the old file's mode, else 0666 less the umask)
        try:
            mode = os.stat(path).st_mode & 0o777
        except OSError:
            umask = os.umask(0o022)
            os.umask(umask)
            mode = 0o666 & ~umask
        os.chmod(tmp, mode)
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise


def _cell(v):
    if v is None:
        return ""
    if isinstance(v, float) or getattr(getattr(v, "dtype", None), "kind", "") == "f":
        v = float(v)
        return repr(v) if math.isfinite(v) else ""
    return v


def csv_text(header, rows) -> str:
    """CSV text: ``header``, then one line per row; floats written exactly
    (``repr``), None and non-finite values as empty cells."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(list(header))
    for row in rows:
        w.writerow([_cell(v) for v in row])
    return buf.getvalue()


#: A built-in example, used by ``freqpair analyze --example`` and the app.
BUILTIN_EXAMPLE = """\
name = "Built-in example: bipolar pair, 10 k loads, 1 M || 2 pF tail"

[supply]
positive = 12
negative = -12

[bias]
tail_current = "1 mA"
input_common_mode = 0
temperature = 300

[pair]
type = "npn"
beta = 200
early_voltage = 80
vbe = 0.7
base_resistance = 100
cje = "2 pF"
transit_time = "0.3 ns"
cjc0 = "1 pF"
phi_c = 0.75
m_c = 0.33
ccs = "0.5 pF"

[load]
type = "resistor"
resistance = "10 k"
capacitance = "1 pF"

[tail]
type = "norton"
resistance = "1 M"
capacitance = "2 pF"

[source]
resistance = "1 k"

[mismatch]
load = 0.01
gm = 0.0

[sweep]
start = "1 Hz"
stop = "10 GHz"
points_per_decade = 50
"""
