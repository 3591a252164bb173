"""The explorer under load: concurrent sessions over the real websocket.

The real server (``freqpair app --port N --no-browser``, its own process, so
its memory is read alone from /proc) serves 20 sessions at once; each is a
Bokeh client session over the loopback websocket, driven from its own thread
like a browser tab: 50 random control changes from a seeded generator — valid
values in engineering notation, garbage, negative sizes, infeasible bias,
unknown and real kind switches, CMRR targets, loop on/off. After every change
the client waits until the server has answered that change (the server
handles one connection's messages in order, so a server-info request sent
after the change is answered after every patch the change caused).

Checks: no session disconnects or shows an internal error; every change that
is invalid by construction is refused with the one-line message; the server
logs no error; its resident memory stays under a stated bound; each session's
final curves equal :func:`freqpair.explore.explore` on the design the session
should hold (rebuilt here from the changes the server accepted). Latency
percentiles go to ``test-artifacts/app_load.txt`` and the terminal.
"""
from __future__ import annotations

import dataclasses
import os
import socket
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np
import pytest

from freqpair.design import BUILTIN_EXAMPLE, design_from_text, design_to_dict, parse_design
from freqpair.design import replace_value
from freqpair.errors import FreqpairError
from freqpair.explore import KIND_CHOICES, editable_values, explore, explore_grid, switch_kind

ROOT = Path(__file__).resolve().parent.parent
ARTIFACTS = ROOT / "test-artifacts"

N_SESSIONS = int(os.environ.get('LT_S', 20))
N_CHANGES = int(os.environ.get('LT_C', 50))
SEED = 20_240_610
#: Whole run (connect, 20 × 50 changes, checks) must finish within this [s].
TIME_CAP_S = 300.0
#: One change's round trip may take at most this long before the test gives up [s].
ROUNDTRIP_TIMEOUT_S = 60.0
#: Server resident memory may grow at most this much over its idle start [MB].
RSS_GROWTH_BOUND_MB = 300.0
#: ... and at most this much while the 1,000 changes run (no leak per change) [MB].
RSS_STEADY_BOUND_MB = 100.0
N_POINTS = 500          # the app's curve length (freqpair.app.view.N_POINTS)
REFUSED = "kept the last good result"
INTERNAL = "could not analyse"        # the app's wording for an unexpected exception

GARBAGE = ("ten k", "1..2 p", "pF", "", " ", "nan", "inf", "-inf", "1e999", "0x10",
           "12 parsecs", "∞", "k10", "None", "[1, 2]", "= 3", "1 2 3")
NON_NEGATIVE = ("bias.tail_current", "bias.temperature", "pair.", "load.", "tail.",
                "source.", "sweep.")


# ------------------------------------------------------------------ server
def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _rss_mb(pid: int, field: str = "VmRSS") -> float:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith(field + ":"):
            return int(line.split()[1]) / 1024.0
    raise AssertionError(f"{field} not in /proc/{pid}/status")


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    if not Path("/proc/self/status").exists():
        pytest.skip("needs /proc to read the server's memory")
    port = _free_port()
    log = tmp_path_factory.mktemp("app_load") / "server.log"
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(
        [str(ROOT)] + [p for p in os.environ.get("PYTHONPATH", "").split(os.pathsep) if p]))
    with open(log, "wb") as err:
        proc = subprocess.Popen([sys.executable, "-m", "freqpair.cli", "app", "--port", str(port),
                                 "--no-browser"], stdout=subprocess.PIPE, stderr=err, env=env,
                                cwd=ROOT)
    try:
        line = proc.stdout.readline().decode()
        assert "freqpair explorer at" in line, (line, log.read_text())
        yield {"url": f"http://127.0.0.1:{port}/", "pid": proc.pid, "log": log}
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()
        proc.stdout.close()


# ------------------------------------------------------------------ client side
def _roundtrip(session, sizes: list) -> None:
    """Wait until the server has handled everything this session sent so far.

    The change's own PATCH-DOC is already queued on the session's loop; a
    SERVER-INFO-REQ queued after it is answered only after the server finished
    the change (one connection's messages are handled in order) and wrote every
    patch it caused. Patches are applied to the client document as they come
    (the public ``force_roundtrip`` would drop them while it waits).
    """
    conn = session._connection
    req = conn._protocol.create("SERVER-INFO-REQ")
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
                sizes.append(max([len(msg.content_json)] +
                                 [len(b.to_bytes()) for b in getattr(msg, "buffers", [])]))
                session._handle_patch(msg)
            elif msg.header.get("reqid") == reqid:
                return

    conn._loop.run_sync(pump, timeout=ROUNDTRIP_TIMEOUT_S)


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
    key: str = ""          # design key (text inputs)


class Mirror:
    """What one session should hold: the design after the changes the server accepted."""

    def __init__(self):
        self.design = design_from_text(BUILTIN_EXAMPLE)
        self.target = "60"
        self.target_at_last_good = 60.0

    def draw(self, rng, doc) -> Change:
        u = rng.random()
        if u < 0.08:
            return self._kind(rng)
        if u < 0.13:
            return self._target(rng)
        if u < 0.17:
            return self._feedback(rng, doc)
        values = [ev for ev in editable_values(self.design)
                  if doc.select_one({"name": f"text:{ev.key}"}) is not None
                  and doc.select_one({"name": f"text:{ev.key}"}).value != ""]
        ev = values[rng.integers(len(values))]
        current = doc.select_one({"name": f"text:{ev.key}"}).value
        if u < 0.25:                      # infeasible bias: far too much tail current
            if ev.key != "bias.tail_current":
                ev = next(e for e in values if e.key == "bias.tail_current")
            text = f"{rng.uniform(0.3, 3):.3g} A"
        elif u < 0.37:                    # garbage text
            text = GARBAGE[rng.integers(len(GARBAGE))]
            return self._text(ev.key, text, current, invalid=ev.key != "feedback.factor")
        elif u < 0.43 and ev.key.startswith(NON_NEGATIVE) and ev.value > 0:
            text = "-" + ev.text          # a negative size
            return self._text(ev.key, text, current, invalid=True)
        else:                             # a valid value near the present one
            if ev.scale == "int":
                x = int(rng.integers(5, 200))
            elif ev.scale == "log":
                centre = ev.slider_value()
                x = ev.from_slider(rng.uniform(centre - 1, centre + 1))
            else:
                x = ev.from_slider(rng.uniform(ev.slider_lo, ev.slider_hi))
            text = dataclasses.replace(ev, value=float(x)).text
        return self._text(ev.key, text, current, invalid=False)

    def _text(self, key, text, current, invalid) -> Change:
        if text == current:               # no change would be sent: make one
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
        return Change(f"text:{key}", text, invalid, candidate, key)

    def _kind(self, rng) -> Change:
        section = list(KIND_CHOICES)[rng.integers(len(KIND_CHOICES))]
        now = getattr(self.design, section).type
        if rng.random() < 0.25:
            return Change(f"kind:{section}", "triode", True, None)
        kind = [k for k in KIND_CHOICES[section] if k != now][
            rng.integers(len(KIND_CHOICES[section]) - 1)]
        return Change(f"kind:{section}", kind, False, switch_kind(self.design, section, kind))

    def _target(self, rng) -> Change:
        text = ("lots", "-", "1e6", "")[rng.integers(4)] if rng.random() < 0.4 else \
            f"{rng.uniform(20, 120):.1f}"
        if text == self.target:
            text = text + " dB"
        return Change("cmrr_target", text, _target_db(text) is None, self.design)

    def _feedback(self, rng, doc) -> Change:
        box = doc.select_one({"name": "text:feedback.factor"})
        if self.design.feedback is not None and rng.random() < 0.5:
            return self._text("feedback.factor", "", box.value, invalid=False)
        text = f"{10 ** rng.uniform(-3, 0):.3g}"
        return self._text("feedback.factor", text, box.value, invalid=False)


def _message(doc) -> str:
    return doc.select_one({"name": "message"}).text


def _drive(i: int, url: str, deadline: float, out: dict) -> None:
    """One session: connect, make the changes, keep what is needed for the checks."""
    from bokeh.client import pull_session

    rng = np.random.default_rng([SEED, i])
    rec = out[i] = {"latency_s": [], "sizes": [], "accepted": 0, "refused": 0, "done": 0}
    # Bokeh formats every patched value for a trace-level log line even when
    # that level is off; short array reprs keep this client's CPU for the changes
    with np.printoptions(threshold=8, edgeitems=1):
        _drive_session(i, url, deadline, rng, rec, pull_session(url=url))


def _drive_session(i, url, deadline, rng, rec, session) -> None:
    try:
        doc = session.document
        mirror = Mirror()
        for _ in range(N_CHANGES):
            if time.monotonic() > deadline:
                break
            change = mirror.draw(rng, doc)
            widget = doc.select_one({"name": change.widget})
            assert widget is not None, f"session {i}: {change.widget} missing in the client document"
            t0 = time.perf_counter()
            widget.value = change.value
            _roundtrip(session, rec["sizes"])
            rec["latency_s"].append(time.perf_counter() - t0)
            msg = _message(doc)
            assert INTERNAL not in msg, f"session {i}: {change}: {msg}"
            refused = REFUSED in msg
            if change.widget == "cmrr_target":
                mirror.target = change.value
            if change.invalid:
                assert refused, f"session {i}: invalid {change.widget} = {change.value!r} accepted"
            if refused:
                rec["refused"] += 1
            else:
                assert change.candidate is not None, \
                    f"session {i}: {change.widget} = {change.value!r} accepted, expected refusal"
                mirror.design = change.candidate
                mirror.target_at_last_good = _target_db(mirror.target)
                rec["accepted"] += 1
            rec["done"] += 1
        rec["connected"] = session.connected
        rec["message"] = _message(doc)
        rec["curves"] = {k: np.asarray(v) for k, v in
                         doc.select_one({"name": "curves_source"}).data.items()}
        rec["corner"] = {k: list(v) for k, v in
                         doc.select_one({"name": "corner_source"}).data.items()}
        rec["target"] = {k: list(v) for k, v in
                         doc.select_one({"name": "target_source"}).data.items()}
        rec["mirror"] = mirror
    finally:
        session.close()
        loop = session._connection._loop
        try:
            loop.run_sync(lambda: None)       # let the close frame go out
        finally:
            loop.close(all_fds=True)


def test_twenty_sessions_of_random_changes_stay_alive_bounded_and_exact(server, request):
    rss_idle = _rss_mb(server["pid"])
    t_start = time.monotonic()
    deadline = t_start + TIME_CAP_S * 0.8
    out: dict = {}
    errors: dict = {}

    def run(i):
        try:
            _drive(i, server["url"], deadline, out)
        except BaseException as exc:          # reported below, per session
            errors[i] = f"{exc.__class__.__name__}: {exc}"

    threads = [threading.Thread(target=run, args=(i,), daemon=True) for i in range(N_SESSIONS)]
    rss_samples = []
    for t in threads:
        t.start()
    while any(t.is_alive() for t in threads) and time.monotonic() < t_start + TIME_CAP_S:
        rss_samples.append((time.monotonic() - t_start, _rss_mb(server["pid"])))
        time.sleep(0.5)
    for t in threads:
        t.join(timeout=max(0.0, t_start + TIME_CAP_S - time.monotonic()))
    wall = time.monotonic() - t_start
    rss_end = _rss_mb(server["pid"])
    rss_peak = _rss_mb(server["pid"], "VmHWM")
    assert not any(t.is_alive() for t in threads), f"sessions still running after {TIME_CAP_S} s"
    assert not errors, errors

    # latency and memory, written down before the checks that may fail
    lat = np.array([x for r in out.values() for x in r["latency_s"]]) * 1e3
    p50, p90, p99 = np.percentile(lat, [50, 90, 99])
    accepted = sum(r["accepted"] for r in out.values())
    refused = sum(r["refused"] for r in out.values())
    biggest = max(max(r["sizes"], default=0) for r in out.values())
    # RSS once every session has its document (the first samples after all connected)
    rss_connected = rss_samples[min(len(rss_samples) - 1, 4)][1] if rss_samples else rss_idle
    summary = (f"app load: {N_SESSIONS} sessions x {N_CHANGES} changes = {lat.size} "
               f"({accepted} accepted, {refused} refused) in {wall:.1f} s; latency ms "
               f"p50 {p50:.0f} p90 {p90:.0f} p99 {p99:.0f} max {lat.max():.0f}; server RSS MB "
               f"idle {rss_idle:.0f} end {rss_end:.0f} peak {rss_peak:.0f}; largest websocket "
               f"message from the server {biggest / 1024:.0f} kB")
    ARTIFACTS.mkdir(exist_ok=True)
    (ARTIFACTS / "app_load.txt").write_text(
        summary + "\nrss samples (s, MB): " +
        " ".join(f"{t:.1f}:{m:.0f}" for t, m in rss_samples) + "\n")
    capman = request.config.pluginmanager.getplugin("capturemanager")
    with capman.global_and_fixture_disabled():
        print("\n" + summary)

    # every session made all its changes and is alive, with no internal error
    assert all(r["done"] == N_CHANGES for r in out.values()), {
        i: r["done"] for i, r in out.items()}
    for i, r in out.items():
        assert r["connected"], f"session {i} disconnected"
        assert INTERNAL not in r["message"], r["message"]
    # common practice: a long-running server's memory is bounded, not growing per request
    assert rss_end - rss_idle < RSS_GROWTH_BOUND_MB, (rss_idle, rss_end)
    assert rss_peak - rss_idle < RSS_GROWTH_BOUND_MB, (rss_idle, rss_peak)
    assert rss_end - rss_connected < RSS_STEADY_BOUND_MB, (rss_connected, rss_end)
    # the server logged no error (Bokeh logs a failing callback at ERROR level)
    log = server["log"].read_text(errors="replace")
    assert "ERROR" not in log and "Traceback" not in log, log[-2000:]

    # oracle: freqpair.explore.explore (the library) on each session's final design
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
