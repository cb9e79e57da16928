"""Telling someone: a command of the user's choosing run on each event that matters to a recording.

`EventCommand(argv, timeout_s=)` runs `argv` (no shell: the user's words split as a POSIX shell splits
them, so `sh -c '...'` is there for whoever wants a shell) once per event, with the event as one JSON
object on its standard input and as `BENCHLOG_*` environment variables (docs/commands.md, "Events").

The recording never waits for it: `post` only queues the event (a bounded queue), a worker thread runs
the calls one at a time, each in a process group of its own that is killed (the whole group) and reaped
when it outlasts `timeout_s`. A call that fails (not found, non-zero exit, timed out) or an event that
finds the queue full becomes a `Problem`, which the recorder drains with `take_problems` and stores as an
incident of the run; `say` tells the user once per kind of problem.
"""

from __future__ import annotations

import json
import os
import queue
import signal
import subprocess
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass

QUEUE_SIZE = 64  # events waiting for the command; one more is a problem of its own ("queue full")

# what a problem was, one word each: the kinds `say` tells once
NOT_FOUND = "not found"
EXIT = "exit status"
TIMEOUT = "timed out"
QUEUE_FULL = "queue full"
CANNOT_START = "cannot start"
NOT_SENT = "not sent"


@dataclass(frozen=True, slots=True)
class Problem:
    """An event the command did not take well: `what` (one of the kinds above), `detail` in words, the
    host times (ns) the call started and ended."""

    event: dict
    what: str
    detail: str
    host_start_ns: int
    host_end_ns: int


def event_env(event: dict) -> dict[str, str]:
    """The event as environment variables: each field `name` with a value as BENCHLOG_NAME."""
    out = {}
    for k, v in event.items():
        if v is None or isinstance(v, (dict, list)):
            continue
        out["BENCHLOG_" + k.upper()] = str(v).lower() if isinstance(v, bool) else str(v)
    return out


class EventCommand:
    """See the module doc. `context` fields (run, bench) go into every event, `units[channel]` (unit,
    part, lot, ...) into every event of that channel."""

    def __init__(
        self,
        argv: list[str],
        *,
        timeout_s: float = 10.0,
        queue_size: int = QUEUE_SIZE,
        say: Callable[[str], None] | None = None,
    ) -> None:
        self.argv = list(argv)
        self.timeout_s = float(timeout_s)
        self.context: dict = {}
        self.units: dict[int, dict] = {}
        self._say = say
        self._said: set[str] = set()
        self._queue: queue.Queue = queue.Queue(maxsize=queue_size)
        self._problems: list[Problem] = []
        self._lock = threading.Lock()
        self._abandon = threading.Event()  # close() gave up waiting: kill the call running, send no more
        self._closed = False
        self.sent = 0  # calls that ended with exit status 0
        self._thread = threading.Thread(target=self._serve, name="benchlog-on-event", daemon=True)
        self._thread.start()

    # -- the recorder's side ------------------------------------------------------------------------
    def post(self, event: str, channel: int | None = None, **fields) -> None:
        """Queue one event (never blocks); a full queue is a problem recorded, not a wait."""
        body = {"event": event, **self.context}
        if channel is not None:
            body["channel"] = int(channel)
            body.update(self.units.get(int(channel), {}))
        body.update(fields)
        body["time"] = time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())
        if self._closed:
            return
        try:
            self._queue.put_nowait(body)
        except queue.Full:
            now = time.time_ns()
            self._problem(Problem(body, QUEUE_FULL, f"{QUEUE_SIZE} events already waiting", now, now))

    def take_problems(self) -> list[Problem]:
        with self._lock:
            out, self._problems = self._problems, []
        return out

    def close(self, wait_s: float) -> None:
        """Let the queued events go out for up to `wait_s`, then kill the call running and drop the rest
        (each a problem: not sent). Idempotent."""
        if self._closed:
            return
        self._closed = True
        end = time.monotonic() + max(0.0, wait_s)
        while True:  # the end marker, once there is room for it
            try:
                self._queue.put(None, timeout=max(0.01, min(0.1, end - time.monotonic())))
                break
            except queue.Full:
                if time.monotonic() >= end:
                    break
        self._thread.join(max(0.0, end - time.monotonic()))
        if self._thread.is_alive():
            self._abandon.set()
            self._thread.join()  # the worker kills its call within one poll and drains nothing more
        while True:
            try:
                body = self._queue.get_nowait()
            except queue.Empty:
                break
            if body is not None:
                now = time.time_ns()
                self._problem(Problem(body, NOT_SENT, "the recording ended before its turn", now, now))

    # -- the worker ---------------------------------------------------------------------------------
    def _serve(self) -> None:
        while not self._abandon.is_set():
            body = self._queue.get()
            if body is None:
                return
            self._call(body)

    def _call(self, body: dict) -> None:
        start = time.time_ns()
        env = {**os.environ, **event_env(body)}
        try:
            proc = subprocess.Popen(
                self.argv,
                stdin=subprocess.PIPE,
                stdout=2,  # its output goes where ours says things: record's standard output stays ours
                env=env,
                close_fds=True,
                start_new_session=True,  # a group of its own: a timeout kills what it started too
            )
        except OSError as exc:
            what = NOT_FOUND if isinstance(exc, FileNotFoundError) else CANNOT_START
            said = f"cannot start {self.argv[0]}: {exc.strerror or exc}"
            self._problem(Problem(body, what, said, start, start))
            return
        try:
            proc.stdin.write(json.dumps(body).encode() + b"\n")
        except OSError:
            pass  # a command that does not read its input has the variables
        finally:
            try:
                proc.stdin.close()
            except OSError:
                pass
        end = time.monotonic() + self.timeout_s
        rc = None
        while rc is None:
            try:
                rc = proc.wait(0.05)
            except subprocess.TimeoutExpired:
                if self._abandon.is_set() or time.monotonic() >= end:
                    break
        if rc is None:
            _kill_group(proc)
            why = "the recording ended" if self._abandon.is_set() else f"after {self.timeout_s:g} s"
            self._problem(Problem(body, TIMEOUT, f"timed out ({why}); killed", start, time.time_ns()))
        elif rc != 0:
            said = f"killed by signal {-rc}" if rc < 0 else f"exit status {rc}"
            self._problem(Problem(body, EXIT, said, start, time.time_ns()))
        else:
            self.sent += 1

    def _problem(self, p: Problem) -> None:
        with self._lock:
            self._problems.append(p)
            first = p.what not in self._said
            self._said.add(p.what)
        if first and self._say is not None:
            self._say(
                f"benchlog: the --on-event command failed on a {p.event.get('event')} event: {p.detail} "
                f"(kept as an incident of the run; further '{p.what}' failures are recorded there only)"
            )


def _kill_group(proc: subprocess.Popen) -> None:
    """SIGKILL to the call's process group (what it started too), then reap the call."""
    try:
        os.killpg(proc.pid, signal.SIGKILL)
    except (ProcessLookupError, PermissionError):
        pass
    try:
        proc.kill()
    except OSError:
        pass
    proc.wait()


__all__ = ["EventCommand", "Problem", "event_env"]
