"""The explorer under load: concurrent sessions over the real websocket.

The real server (``freqpair app --port N --procs 2 --no-browser``: its own
processes, so their memory is read alone from /proc) serves 20 sessions at once; each is a
Bokeh client session over the loopback websocket, driven from its own thread
like a browser tab: 50 random control changes from a seeded generator — valid
values in engineering notation, garbage, negative sizes, infeasible bias,
unknown and real kind switches, CMRR targets, loop on/off, design-file uploads
(near the size limit, over it, not UTF-8, not TOML). After every change
the client waits until the server has answered that change (the server
handles one connection's messages in order, so a server-info request sent
after the change is answered after every patch the change caused).

Checks: no session disconnects or shows an internal error; every change that
is invalid by construction is refused with the one-line message; the server
logs no error; its resident memory stays under a stated bound; each session's
final curves equal :func:`freqpair.views.explore.explore` on the design the session
should hold (rebuilt here from the changes the server accepted). Latency
percentiles go to ``test-artifacts/app_load.txt`` and the terminal.
"""
from __future__ import annotations

import base64
import dataclasses
import os
import subprocess
import sys
import threading
import time
from collections import Counter
from pathlib import Path

import numpy as np
import pytest

from freqpair.app.view import MAX_FILE_BYTES, N_POINTS
from freqpair.design.files import BUILTIN_EXAMPLE, design_from_text
from freqpair.design.schema import design_to_dict, parse_design
from freqpair.design.keys import replace_value
from freqpair.design.errors import FreqpairError
from freqpair.views.explore import (
    KIND_CHOICES,
    editable_values,
    explore,
    explore_grid,
    switch_kind,
)

from browser_util import free_port, stop_server

ROOT = Path(__file__).resolve().parent.parent
ARTIFACTS = ROOT / "test-artifacts"

N_SESSIONS = 20
N_CHANGES = 50
SEED = 20_240_610
#: Whole run (connect, 20 × 50 changes, checks) must finish within this [s].
TIME_CAP_S = 300.0
#: One change's round trip may take at most this long before the test gives up [s].
ROUNDTRIP_TIMEOUT_S = 60.0
#: Server resident memory may grow at most this much over its idle start [MB].
RSS_GROWTH_BOUND_MB = 300.0
#: ... and at most this much while the 1,000 changes run (no leak per change) [MB].
RSS_STEADY_BOUND_MB = 100.0
#: Server processes (``freqpair app --procs``): one per core of the 2-core machine
#: (``FREQPAIR_LOAD_PROCS=1`` runs the same test against one, for comparison).
SERVER_PROCS = int(os.environ.get("FREQPAIR_LOAD_PROCS", "2"))
#: Latency targets per change [s] (issue: p50 ≤ 0.5 s, p90 ≤ 1.0 s for 20 sessions on
#: 2 cores); the test fails on a regression beyond twice these.
P50_TARGET_S, P90_TARGET_S = 0.5, 1.0
REGRESSION_FACTOR = 2.0
REFUSED = "kept the last good result"
INTERNAL = "could not analyse"        # the app's wording for an unexpected exception

GARBAGE = ("ten k", "1..2 p", "pF", "", " ", "nan", "inf", "-inf", "1e999", "0x10",
           "12 parsecs", "∞", "k10", "None", "[1, 2]", "= 3", "1 2 3")
EXAMPLES = sorted((ROOT / "examples").glob("*.toml"))
UPLOAD_NEAR_LIMIT = 250 * 1024      # bytes; under freqpair.app.view.MAX_FILE_BYTES
NON_NEGATIVE = ("bias.tail_current", "bias.temperature", "pair.", "load.", "tail.",
                "source.", "sweep.")


# ------------------------------------------------------------------ server
def _one_rss_mb(pid: int, field: str) -> float:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith(field + ":"):
            return int(line.split()[1]) / 1024.0
    raise AssertionError(f"{field} not in /proc/{pid}/status")


def _server_pids(pid: int) -> list[int]:
    """The server's processes: the one started and the server processes it forked."""
    children = Path(f"/proc/{pid}/task/{pid}/children")
    kids = [int(x) for x in children.read_text().split()] if children.exists() else []
    return [pid] + kids


def _rss_mb(pid: int, field: str = "Pss") -> float:
    """Memory of the whole server (every process of it) [MB]: the sum of each
    process's proportional set size (pages shared after the fork counted once
    across them), from /proc/PID/smaps_rollup; ``VmRSS`` etc. from /proc/PID/status."""
    total = 0.0
    for p in _server_pids(pid):
        try:
            if field == "Pss":
                text = Path(f"/proc/{p}/smaps_rollup").read_text()
                total += next(int(line.split()[1]) for line in text.splitlines()
                              if line.startswith("Pss:")) / 1024.0
            else:
                total += _one_rss_mb(p, field)
        except (FileNotFoundError, ProcessLookupError, StopIteration):
            pass
    return total


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    if not Path("/proc/self/status").exists():
        pytest.skip("needs /proc to read the server's memory")
    port = free_port()
    log = tmp_path_factory.mktemp("app_load") / "server.log"
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(
        [str(ROOT)] + [p for p in os.environ.get("PYTHONPATH", "").split(os.pathsep) if p]))
    with open(log, "wb") as err:
        proc = subprocess.Popen([sys.executable, "-m", "freqpair.cli", "app", "--port", str(port),
                                 "--procs", str(SERVER_PROCS), "--no-browser"],
                                stdout=subprocess.PIPE, stderr=err, env=env, cwd=ROOT)
    try:
        line = proc.stdout.readline().decode()
        assert "freqpair explorer at" in line, (line, log.read_text())
        yield {"url": f"http://127.0.0.1:{port}/", "pid": proc.pid, "log": log}
    finally:
        stop_server(proc, timeout=20)


# ------------------------------------------------------------------ client side
def _frame_bytes(msg) -> int:
    """Largest websocket frame of one Bokeh message (content JSON or one buffer) [bytes]."""
    return max([len(msg.content_json)] + [len(b.to_bytes()) for b in msg.buffers])


def _roundtrip(session, sizes: list, request: str = "SERVER-INFO-REQ"):
    """Wait until the server has handled everything this session sent so far.

    The change's own PATCH-DOC is already queued on the session's loop; a
    SERVER-INFO-REQ queued after it is answered only after the server finished
    the change (one connection's messages are handled in order) and wrote every
    patch it caused. Patches are applied to the client document as they come
    (the public ``force_roundtrip`` would drop them while it waits).
    """
    conn = session._connection
    req = conn._protocol.create(request)
    reqid = req.header["msgid"]

    async def pop():
        # as ClientConnection._pop_message, without its debug line (it formats
        # the whole message even when debug logging is off)
        while True:
            fragment = await conn._socket.read_message()
            if fragment is None:
                raise ConnectionError("the server closed the websocket")
            msg = await conn._receiver.consume(fragment)
            if msg is not None:
                return msg

    async def pump():
        await conn.send_message(req)
        while True:
            msg = await pop()
            if msg.msgtype == "PATCH-DOC":
                sizes.append(_frame_bytes(msg))
                _keep_unsent_columns(session.document, msg)
                session._handle_patch(msg)
            elif msg.header.get("reqid") == reqid:
                return msg

    return conn._loop.run_sync(pump, timeout=ROUNDTRIP_TIMEOUT_S)


def _keep_unsent_columns(doc, msg) -> None:
    """Apply "columns changed" events as the page does: the columns not sent stay.

    The server sends only the changed columns of a data source; the browser
    merges them into the source's data, while the Python client would
    replace the whole data with them. This adds the client's other columns to
    each such event before it is applied, as the browser does.
    """
    for event in msg.content.get("events", ()):
        if event.get("kind") != "ColumnDataChanged" or event.get("cols") is None:
            continue
        model = doc.get_model_by_id(event["model"]["id"])
        if model is None:
            continue
        data = event["data"]
        entries = data.get("entries") if isinstance(data, dict) and data.get("type") == "map" \
            else None
        have = {k for k, _ in entries} if entries is not None else set(data)
        for name, column in model.data.items():
            if name not in have:
                value = column.tolist() if isinstance(column, np.ndarray) else list(column)
                if entries is not None:
                    entries.append([name, value])
                else:
                    data[name] = value


def _target_db(text: str) -> float | None:
    """The CMRR target the app reads from its box (None: the box holds no number)."""
    try:
        value = float(text.strip().removesuffix("dB").strip())
    except ValueError:
        return None
    return value if -400 < value < 400 else None


@dataclasses.dataclass
class Change:
    widget: str            # model name in the document
    value: str
    invalid: bool          # invalid by construction: the server must refuse it
    candidate: object      # the design the server should hold if it accepts (None: keep)
    key: str = ""          # design key (text inputs) or file name (uploads)
    what: str = ""         # kind of change, for the tally


class Mirror:
    """What one session should hold: the design after the changes the server accepted."""

    def __init__(self):
        self.design = design_from_text(BUILTIN_EXAMPLE)
        self.target = "60"
        self.target_at_last_good = 60.0
        self.uploads = 0

    def draw(self, rng, doc) -> Change:
        u = rng.random()
        if u < 0.03:
            return self._upload(rng)
        if u < 0.08:
            return self._kind(rng)
        if u < 0.13:
            return self._target(rng)
        if u < 0.17:
            return self._feedback(rng, doc)
        values = editable_values(self.design)
        if u < 0.25:                      # far too much tail current (infeasible bias)
            ev = next(e for e in values if e.key == "bias.tail_current")
            return self._text(doc, ev.key, f"{rng.uniform(0.3, 3):.3g} A", False, "bias")
        ev = values[rng.integers(len(values))]
        if u < 0.37:                      # garbage text
            text = GARBAGE[rng.integers(len(GARBAGE))]
            return self._text(doc, ev.key, text, ev.key != "feedback.factor", "garbage")
        if u < 0.43 and ev.key.startswith(NON_NEGATIVE) and ev.value > 0:
            return self._text(doc, ev.key, "-" + ev.text, True, "negative")
        # a valid value near the present one
        if ev.scale == "int":
            x = int(rng.integers(5, 200))
        elif ev.scale == "log":       # within a decade either side
            centre = ev.slider_value()
            x = ev.from_slider(rng.uniform(centre - 1, centre + 1))
        else:
            x = ev.from_slider(rng.uniform(ev.slider_lo, ev.slider_hi))
        text = dataclasses.replace(ev, value=float(x)).text
        return self._text(doc, ev.key, text, False, "value")

    def _text(self, doc, key, text, invalid, what) -> Change:
        box = doc.select_one({"name": f"text:{key}"})
        assert box is not None, f"no text box for {key} in the client document"
        if text == box.value:             # no change would be sent: make one
            text = text + " "
        try:
            if key == "feedback.factor" and not text.strip():     # empty box: no loop
                data = design_to_dict(self.design)
                data.pop("feedback", None)
                candidate = parse_design(data)
            else:
                candidate = replace_value(self.design, key, text.strip())
        except FreqpairError:
            candidate = None
        return Change(f"text:{key}", text, invalid, candidate, key, what)

    def _upload(self, rng) -> Change:
        """A design file dropped on the file input (base64, as the browser sends it)."""
        which = rng.integers(4)
        self.uploads += 1   # each upload differs (an unchanged value would not be sent)
        stamp = f"# upload {self.uploads}\n"
        if which == 0:      # a real design padded with comments to near the size limit
            path = EXAMPLES[rng.integers(len(EXAMPLES))]
            text = stamp + path.read_text()
            body = text + "# " + "padding " * ((UPLOAD_NEAR_LIMIT - len(text)) // 8) + "\n"
            return Change("file", _b64(body.encode()), False, design_from_text(text),
                          path.name, "upload")
        bad = (b"#" * (MAX_FILE_BYTES + 4096),       # over the size limit
               b"\xff\xfe\x00 not text",            # not UTF-8
               b"[pair\nbeta=")[which - 1]            # not TOML
        return Change("file", _b64(stamp.encode() + bad), True, None, f"bad{which}.toml",
                      "bad upload")

    def _kind(self, rng) -> Change:
        section = list(KIND_CHOICES)[rng.integers(len(KIND_CHOICES))]
        now = getattr(self.design, section).type
        if rng.random() < 0.25:
            return Change(f"kind:{section}", "triode", True, None, what="unknown kind")
        kind = [k for k in KIND_CHOICES[section] if k != now][
            rng.integers(len(KIND_CHOICES[section]) - 1)]
        return Change(f"kind:{section}", kind, False, switch_kind(self.design, section, kind),
                      what="kind")

    def _target(self, rng) -> Change:
        text = ("lots", "-", "1e6", "")[rng.integers(4)] if rng.random() < 0.4 else \
            f"{rng.uniform(20, 120):.1f}"
        if text == self.target:
            text = text + " dB"
        return Change("cmrr_target", text, _target_db(text) is None, self.design,
                      what="target")

    def _feedback(self, rng, doc) -> Change:
        fb = self.design.feedback
        if fb is not None and fb.type == "divider":     # no β_f box under a divider (§7e)
            return self._text(doc, "feedback.shunt_capacitance",
                              f"{10 ** rng.uniform(-13, -11):.3g}", False, "divider")
        if self.design.feedback is not None and rng.random() < 0.5:
            return self._text(doc, "feedback.factor", "", False, "loop off")
        return self._text(doc, "feedback.factor", f"{10 ** rng.uniform(-3, 0):.3g}", False,
                          "loop on")


def _b64(data: bytes) -> str:
    return base64.b64encode(data).decode()


def _message(doc) -> str:
    return doc.select_one({"name": "message"}).text


def _drive(i: int, url: str, deadline: float, out: dict, connected) -> None:
    """One session: connect, wait for all, make the changes, keep what the checks need."""
    from bokeh.client import pull_session

    rng = np.random.default_rng([SEED, i])
    rec = out[i] = {"latency_s": [], "sizes": [], "tally": Counter(), "done": 0, "sent": 0}
    # Bokeh formats every patched value for a trace-level log line even when
    # that level is off; short array reprs keep this client's CPU for the changes
    with np.printoptions(threshold=8, edgeitems=1):
        session = pull_session(url=url)
        try:
            connected.wait(timeout=TIME_CAP_S)
            _changes(i, deadline, rng, rec, session)
            if i == 0:    # the whole document once more, to size the largest frame
                rec["pull_bytes"] = _frame_bytes(_roundtrip(session, [], "PULL-DOC-REQ"))
        finally:
            session.close()
            loop = session._connection._loop
            try:
                loop.run_sync(lambda: None)       # let the close frame go out
            finally:
                loop.close(all_fds=True)


def _changes(i, deadline, rng, rec, session) -> None:
    doc = session.document
    mirror = Mirror()
    for _ in range(N_CHANGES):
        if time.monotonic() > deadline:
            break
        change = mirror.draw(rng, doc)
        widget = doc.select_one({"name": change.widget})
        assert widget is not None, f"session {i}: no {change.widget} in the client document"
        t0 = time.perf_counter()
        if change.widget == "file":
            # the file input's value is read-only in Python; the browser sets it
            # (file name first) and so do we, through the same JSON path
            widget.set_from_json("filename", change.key)
            widget.set_from_json("value", change.value)
        else:
            widget.value = change.value
        rec["sent"] = max(rec["sent"], len(change.value))    # this patch's largest frame
        _roundtrip(session, rec["sizes"])
        rec["latency_s"].append(time.perf_counter() - t0)
        msg = _message(doc)
        assert INTERNAL not in msg, f"session {i}: {change}: {msg}"
        refused = REFUSED in msg
        if change.widget == "cmrr_target":
            mirror.target = change.value
        if change.invalid:
            assert refused, f"session {i}: invalid {change.widget} = {change.value!r} accepted"
        if not refused:
            assert change.candidate is not None, \
                f"session {i}: {change.widget} = {change.value!r} accepted, expected refusal"
            mirror.design = change.candidate
            mirror.target_at_last_good = _target_db(mirror.target)
        rec["tally"][change.what, "refused" if refused else "accepted"] += 1
        rec["done"] += 1
    rec["connected"] = session.connected
    rec["message"] = _message(doc)
    rec["curves"] = {k: np.asarray(v) for k, v in
                     doc.select_one({"name": "curves_source"}).data.items()}
    for part in ("corner", "target"):
        rec[part] = {k: list(v) for k, v in doc.select_one({"name": f"{part}_source"}).data.items()}
    rec["mirror"] = mirror


@pytest.mark.slow
def test_twenty_sessions_of_random_changes_stay_alive_bounded_and_exact(server, request):
    load_before = os.getloadavg()[0]
    rss_idle = _rss_mb(server["pid"])
    t_start = time.monotonic()
    deadline = t_start + TIME_CAP_S * 0.8
    out: dict = {}
    errors: dict = {}
    connected = threading.Barrier(N_SESSIONS + 1)

    def run(i):
        try:
            _drive(i, server["url"], deadline, out, connected)
        except BaseException as exc:          # reported below, per session
            errors[i] = f"{exc.__class__.__name__}: {exc}"
            connected.abort()

    threads = [threading.Thread(target=run, args=(i,), daemon=True) for i in range(N_SESSIONS)]
    for t in threads:
        t.start()
    try:                    # every session holds its document: the memory baseline
        connected.wait(timeout=TIME_CAP_S)
    except threading.BrokenBarrierError:
        pass
    t_connected = time.monotonic() - t_start
    rss_connected = _rss_mb(server["pid"])
    rss_samples = []
    while any(t.is_alive() for t in threads) and time.monotonic() < t_start + TIME_CAP_S:
        rss_samples.append(_rss_mb(server["pid"]))
        time.sleep(0.5)
    for t in threads:
        t.join(timeout=max(0.0, t_start + TIME_CAP_S - time.monotonic()))
    wall = time.monotonic() - t_start
    rss_end = _rss_mb(server["pid"])
    rss_peak = max(rss_samples + [rss_connected, rss_end])    # sampled every 0.5 s
    assert not any(t.is_alive() for t in threads), f"sessions still running after {TIME_CAP_S} s"
    assert not errors, errors

    # latency and memory, written down before the checks that may fail
    lat = np.array([x for r in out.values() for x in r["latency_s"]]) * 1e3
    p50, p90, p99 = np.percentile(lat, [50, 90, 99])
    tally = sum((r["tally"] for r in out.values()), Counter())
    accepted = sum(n for (_, verdict), n in tally.items() if verdict == "accepted")
    biggest = max(max(r["sizes"]) for r in out.values())
    summary = (f"app load: {N_SESSIONS} sessions x {N_CHANGES} changes = {lat.size} "
               f"({accepted} accepted, {lat.size - accepted} refused) in {wall:.0f} s "
               f"({lat.size / (wall - t_connected):.1f} changes/s); latency ms p50 {p50:.0f} "
               f"p90 {p90:.0f} p99 {p99:.0f} max {lat.max():.0f} (targets p50 "
               f"{P50_TARGET_S * 1e3:.0f} p90 {P90_TARGET_S * 1e3:.0f}; {SERVER_PROCS} server "
               f"processes; load average {load_before:.2f} before, "
               f"{os.getloadavg()[0]:.2f} after); server memory (PSS) MB idle "
               f"{rss_idle:.0f}, {N_SESSIONS} connected {rss_connected:.0f}, end {rss_end:.0f}, peak "
               f"{rss_peak:.0f}")
    details = (f"connecting {N_SESSIONS} sessions took {t_connected:.1f} s\n"
               f"largest websocket frame: server patches {biggest / 1024:.0f} kB, whole "
               f"document {out[0]['pull_bytes'] / 1024:.0f} kB; from a client "
               f"{max(r['sent'] for r in out.values()) / 1024:.0f} kB (value of one change)\n"
               "changes (kind, verdict: count): " +
               ", ".join(f"{w} {v}: {n}" for (w, v), n in sorted(tally.items())) + "\n"
               "server memory (PSS) samples every 0.5 s [MB]: " +
               " ".join(f"{m:.0f}" for m in rss_samples) + "\n")
    ARTIFACTS.mkdir(exist_ok=True)
    (ARTIFACTS / "app_load.txt").write_text(summary + "\n" + details)
    capman = request.config.pluginmanager.getplugin("capturemanager")
    with capman.global_and_fixture_disabled():
        print("\n" + summary)

    # every session made all its changes and is alive, with no internal error
    assert all(r["done"] == N_CHANGES for r in out.values()), {
        i: r["done"] for i, r in out.items()}
    for i, r in out.items():
        assert r["connected"], f"session {i} disconnected"
        assert INTERNAL not in r["message"], r["message"]
    # the team targets (a change answered within p50 0.5 s, p90 1 s), with room for a
    # noisy machine: a regression beyond twice them fails
    assert p50 <= REGRESSION_FACTOR * P50_TARGET_S * 1e3, summary
    assert p90 <= REGRESSION_FACTOR * P90_TARGET_S * 1e3, summary
    # common practice: a long-running server's memory is bounded, not growing per request
    assert rss_peak - rss_idle < RSS_GROWTH_BOUND_MB, (rss_idle, rss_peak)
    assert rss_end - rss_connected < RSS_STEADY_BOUND_MB, (rss_connected, rss_end)
    # the server logged no error (Bokeh logs a failing callback at ERROR level)
    log = server["log"].read_text(errors="replace")
    assert "ERROR" not in log and "Traceback" not in log, log[-2000:]

    # oracle: freqpair.views.explore.explore (the library) on each session's final design
    for i, r in out.items():
        m = r["mirror"]
        want = explore(m.design, explore_grid(m.design, N_POINTS), target_db=m.target_at_last_good)
        assert set(r["curves"]) == set(want["curves"]), i
        for k, v in want["curves"].items():
            np.testing.assert_allclose(r["curves"][k], np.asarray(v, dtype=float), rtol=1e-9,
                                       atol=0, equal_nan=True, err_msg=f"session {i}: {k}")
        for part in ("corner", "target"):
            for k, v in want[part].items():
                np.testing.assert_allclose(np.asarray(r[part][k], dtype=float),
                                           np.asarray(v, dtype=float), rtol=1e-9,
                                           err_msg=f"session {i}: {part}.{k}")
