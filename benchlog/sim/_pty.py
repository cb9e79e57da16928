"""Serve a simulated sampler on a pseudo-terminal, in a background thread.

The port users open is a symbolic link to the current pty slave (`PtySampler.path`), the way a
`/dev/serial/by-id/...` link names a USB serial board. A pulled cable is modelled as closely as a pty
allows: the master side closes (the reader's next read fails, as when a USB device node vanishes), the
link disappears (reopening fails, as with an absent device), bytes the sampler sends meanwhile are lost,
and after the outage a new pty appears under the same link. A bus-powered board (`pull_powers_off`)
comes back reset: a new announcement and a counter from zero.
"""

from __future__ import annotations

import errno
import fcntl
import os
import select
import shutil
import struct
import tempfile
import termios
import threading
import time
import tty
from collections import deque
from pathlib import Path

from benchlog.errors import ConfigError, PortError
from benchlog.sim._bench import Bench
from benchlog.sim._config import SimConfig
from benchlog.wire import PROTOCOL_VERSION, Announce, Edges, LineEncoder, PackedEncoder

BACKLOG_LIMIT = 1 << 20  # bytes waiting for the pty before the sampler stops generating
STEP_WALL_S = 0.005  # sampler time advances in steps of this much wall time (times speed)
MAX_LAG_WALL_S = 0.5  # a reader slower than this much behind slows simulated time instead
UNHEARD_S = 5.0  # an open port took nothing for this long: its reader is stuck, output is discarded
# (seconds, not less: a reader on a loaded machine can be starved for most of a second and is not stuck)
HOLD_NS = 200_000_000  # while no reader has the port open, the sampler keeps only its latest output
MARKS_KEPT_BYTES = 1 << 22  # output read this long ago is surely out of any port buffer
# A reader opening the port clears its input as the last step of opening (pyserial's `open` ends with a
# tcflush), which the sampler sees through the pty's packet mode: it sends nothing before that, as what
# it sent would be thrown away by the open itself. A reader that never clears (a bare `open`, `cat`) is
# taken to be listening once it has had the port this long.
SETTLE_S = 1.0


class PtySampler:
    """A `Bench` speaking the protocol on a pty. Use as a context manager; `.path` is the port.

    `speed` runs sampler time that many times faster than the wall clock. `link` chooses the port's
    path (default: `port` in a new temporary directory, removed on close).
    """

    def __init__(
        self,
        config: SimConfig,
        seed: int = 0,
        speed: float = 1.0,
        link: str | os.PathLike[str] | None = None,
        keep_truth: bool = True,
    ) -> None:
        if not speed > 0:
            raise ConfigError(f"speed must be > 0, got {speed}")
        self.bench = Bench(config, seed, keep_truth=keep_truth)
        self.speed = float(speed)
        self._tmpdir: str | None = None
        if link is None:
            self._tmpdir = tempfile.mkdtemp(prefix="benchlog-sim-")
            link = Path(self._tmpdir) / "port"
        self.path = str(link)
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self._master = -1
        self._slave = -1
        self.slave_name = ""
        self._backlog = bytearray()
        # (sampler time, bytes, holds an announcement, edges in it)
        self._held: list[tuple[int, bytes, bool, int]] = []
        # edges in what was queued for the port: (stream offset where a chunk of output ends, its edges)
        self._marks: deque[tuple[int, int]] = deque()
        self._queued_bytes = 0  # bytes ever queued for the port (the stream offset of the backlog's end)
        # per pull: edges the sampler had sent that had not all reached the host (in its output buffer,
        # or written to the port and not read) when the cable went: a bus-powered board loses them
        self.edges_in_flight_at_pulls: list[int] = []
        self._sticky: bytes | None = None  # an announcement no reader has heard yet
        self._cmd_buf = bytearray()
        self._pull_request: tuple[float, bool] | None = None
        self._pull_at_cycle: int | None = None
        self._pull_on_command = False  # the pull waits for the host's next command, which it loses
        self._command_arrived = False
        self.bytes_written = 0
        self.bytes_lost_unplugged = 0
        self.bytes_lost_unheard = 0
        self._last_progress = time.monotonic()
        self._listening_since: float | None = None
        self._host_ready = False  # the reader has finished opening the port (cleared its input)
        self.pulled_at_cycles: list[int] = []  # cycles every planned channel had done at each pull
        self.outages: list[tuple[float, float]] = []  # wall-clock (time.time) start/end of each pull
        # an open port that takes nothing for this long has a stuck reader: its output is discarded
        self.unheard_s = UNHEARD_S
        self.commands_seen: list[bytes] = []
        self.error: BaseException | None = None
        self.connected = threading.Event()

    # -- lifecycle ---------------------------------------------------------------------------------
    def __enter__(self) -> PtySampler:
        self.start()
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()

    def start(self) -> None:
        self._open_pty()
        self._thread = threading.Thread(target=self._serve, name="benchlog-sim", daemon=True)
        self._thread.start()

    def stop(self) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join(5)
        self._close_pty()
        if self._tmpdir:
            shutil.rmtree(self._tmpdir, ignore_errors=True)

    def pull_cable(
        self, seconds: float, hold: bool = False, at_cycle: int | None = None, on_command: bool = False
    ) -> None:
        """Pull the cable (from any thread) for `seconds` of wall time: now, or with `at_cycle` once every
        planned channel has done that many cycles (a point in the sampler's run that a host slowed by
        a loaded machine cannot step past), or with `on_command` as the host's next command arrives (a
        cable knocked out as the host writes: that command, and whatever the host writes until the port
        is gone, never reach the sampler). `hold`: a sampler whose buffer holds the whole outage: what
        was sent before the pull is read first, what the sampler sends while the cable is out comes
        after it is back, so the outage costs no data and a seeded run stays the same however long it
        lasts."""
        self._pull_at_cycle = at_cycle
        self._command_arrived = False
        self._pull_on_command = bool(on_command)
        self._pull_request = (float(seconds), bool(hold))

    @property
    def running(self) -> bool:
        return self._thread is not None and self._thread.is_alive()

    # -- pty ---------------------------------------------------------------------------------------
    def _open_pty(self) -> None:
        try:
            master, slave = os.openpty()
        except OSError as exc:
            raise PortError(f"cannot open a pseudo-terminal: {exc.strerror}") from exc
        tty.setraw(slave)
        os.set_blocking(master, False)
        self.slave_name = os.ttyname(slave)
        # The slave is not kept open here: a read on the master then fails with EIO until a reader
        # opens the port, which is how the sampler knows whether anyone listens (as a USB serial board
        # knows whether the host has opened it).
        os.close(slave)
        # packet mode: a read on the master says when the reader clears its input (TIOCPKT_FLUSHREAD)
        fcntl.ioctl(master, termios.TIOCPKT, struct.pack("i", 1))
        self._master, self._slave = master, -1
        self._listening_since = None
        self._host_ready = False
        tmp = self.path + ".new"
        try:
            if os.path.lexists(tmp):
                os.unlink(tmp)
            os.symlink(self.slave_name, tmp)
            os.replace(tmp, self.path)
        except OSError as exc:
            self._close_pty()
            raise PortError(f"cannot create the port link {self.path}: {exc.strerror}") from exc
        self.connected.set()

    def _close_pty(self) -> None:
        self.connected.clear()
        try:
            if os.path.islink(self.path):
                os.unlink(self.path)
        except OSError:
            pass
        for fd in (self._master, self._slave):
            if fd >= 0:
                try:
                    os.close(fd)
                except OSError:
                    pass
        self._master = self._slave = -1

    # -- the loop ----------------------------------------------------------------------------------
    def _serve(self) -> None:
        try:
            self._loop()
        except BaseException as exc:  # reported to the owner, never a traceback on a thread
            self.error = exc

    def _loop(self) -> None:
        bench = self.bench
        faults = bench.config.faults
        pull_at_ns = int(faults.pull_at_s * 1e9) if faults.pull_at_s >= 0 else None
        wall0 = time.monotonic()
        sim0 = bench.now_ns
        self._send_records(bench.advance_to(bench.now_ns))
        while not self._stop.is_set():
            if self._pull_request is not None and self._pull_due():
                (seconds, hold), self._pull_request = self._pull_request, None
                self._pull_on_command = self._command_arrived = False
                self.pulled_at_cycles.append(min(bench.cycles_done.values(), default=0))
                if hold:
                    self._unplugged_holding(seconds, wall0, sim0)
                else:
                    self._unplugged(seconds, faults.pull_powers_off, wall0, sim0)
                continue
            if pull_at_ns is not None and bench.now_ns >= pull_at_ns:
                pull_at_ns = None
                self._unplugged(faults.pull_for_s, faults.pull_powers_off, wall0, sim0)
                continue
            self._read_commands()
            now = time.monotonic()
            target = sim0 + int((now - wall0) * self.speed * 1e9)
            if target - bench.now_ns > MAX_LAG_WALL_S * self.speed * 1e9:
                # the reader cannot keep up: slow simulated time rather than pile up bytes
                wall0, sim0 = now, bench.now_ns
                target = bench.now_ns
            if len(self._backlog) < BACKLOG_LIMIT and target > bench.now_ns:
                step = min(target, bench.now_ns + int(STEP_WALL_S * self.speed * 1e9))
                if pull_at_ns is not None:
                    step = min(step, max(pull_at_ns, bench.now_ns + 1))
                self._send_records(bench.advance_to(step))
            self._flush()
            if self._backlog and self.listening and time.monotonic() - self._last_progress > self.unheard_s:
                # nobody reads the port: like a board whose host is not listening, the sampler runs on
                # and what it sends is lost (a reader that opens later hears the stream from then on)
                self.bytes_lost_unheard += len(self._backlog)
                self._backlog.clear()
                self._marks.clear()
            # behind the wall clock (a step is at most STEP_WALL_S of it): go on at once
            self._wait(0.0 if bench.now_ns < target and len(self._backlog) < BACKLOG_LIMIT else STEP_WALL_S)

    def _pull_due(self) -> bool:
        if self._pull_on_command:
            return self._command_arrived
        at = self._pull_at_cycle
        done = self.bench.cycles_done
        return at is None or (bool(done) and min(done.values()) >= at)

    @property
    def listening(self) -> bool:
        """A reader has finished opening the port (or, one that never clears its input, has had it open
        for SETTLE_S)."""
        since = self._listening_since
        return since is not None and (self._host_ready or time.monotonic() - since >= SETTLE_S)

    def _read_master(self) -> bytes | None:
        """What the reader wrote (b"" for none yet), None when no reader has the port open. Notes the
        reader's arrival and, from the packet-mode status byte, the end of its opening."""
        try:
            chunk = os.read(self._master, 4097)
        except (BlockingIOError, InterruptedError):
            if self._listening_since is None:
                self._listening_since = time.monotonic()
            return b""
        except OSError as exc:
            if exc.errno == errno.EIO:  # no reader has the port open
                self._listening_since = None
                self._host_ready = False
                return None
            raise
        if self._listening_since is None:
            self._listening_since = time.monotonic()
        if not chunk:
            return b""
        if chunk[0] != termios.TIOCPKT_DATA:  # a status byte alone
            if chunk[0] & termios.TIOCPKT_FLUSHREAD:
                self._host_ready = True
            return b""
        self._host_ready = True  # a reader that writes has finished opening the port
        return chunk[1:]

    def _wait(self, timeout: float = STEP_WALL_S) -> None:
        """Until a step of sampler time is due: a step per STEP_WALL_S of wall (a board sends in bursts
        too: the reference firmware every 5 ms or 32 edges). A command from the host, or room in a
        full port, wakes it sooner."""
        if self._master < 0 or self._listening_since is None:
            time.sleep(0.002)
            return
        wr = [self._master] if self._backlog else []
        try:
            select.select([self._master], wr, [], timeout if not self._backlog else min(timeout, 0.001))
        except (OSError, ValueError):
            time.sleep(0.002)

    def _send_records(self, records: list) -> None:
        """Encode (with byte damage) and send; with no reader, hold only the latest output.

        A USB serial board whose host has not opened the port cannot send: its transmit buffer fills
        and older output is lost. It keeps its announcement for the host (the first thing a host must
        hear) and the last `HOLD_NS` of sampler time."""
        bench = self.bench
        data = bench.damage(bench.encode(records))
        if self._listening_since is not None:
            self._deliver_held()
            self._send(data, _edges_in(records))
            return
        announces = [r for r in records if isinstance(r, Announce)]
        if announces:
            enc = LineEncoder(version=PROTOCOL_VERSION) if bench.form == "line" else PackedEncoder()
            self._sticky = enc.encode(announces[-1])
        if data:
            self._held.append((bench.now_ns, data, bool(announces), _edges_in(records)))
        cut = 0
        while cut < len(self._held) and self._held[cut][0] < bench.now_ns - HOLD_NS:
            self.bytes_lost_unheard += len(self._held[cut][1])
            cut += 1
        del self._held[:cut]

    def _deliver_held(self) -> None:
        if self._held or self._sticky:
            if self._sticky is not None and not any(a for _, _, a, _ in self._held):
                self._send(self._sticky)
            for _, data, _, edges in self._held:
                self._send(data, edges)
            self._held.clear()
            self._sticky = None

    def _send(self, data: bytes, edges: int = 0) -> None:
        if data:
            if not self._backlog:
                self._last_progress = time.monotonic()
            self._backlog += data
            self._queued_bytes += len(data)
            if edges:
                self._marks.append((self._queued_bytes, edges))

    def _flush(self) -> None:
        if not self.listening:
            self._last_progress = time.monotonic()
            return
        self._deliver_held()
        while self._backlog and self._master >= 0:
            try:
                n = os.write(self._master, self._backlog[: 1 << 16])
            except BlockingIOError:
                return
            except OSError as exc:
                if exc.errno in (errno.EIO, errno.EAGAIN):
                    return
                raise
            self.bytes_written += n
            self._last_progress = time.monotonic()
            del self._backlog[:n]
        while self._marks and self._marks[0][0] < self.bytes_written - MARKS_KEPT_BYTES:
            self._marks.popleft()  # long read: a port's buffer holds far less than that

    def _read_commands(self) -> None:
        if self._master < 0:
            return
        chunk = self._read_master()
        if chunk is None:
            self._cmd_buf.clear()
            return
        if not chunk:
            return
        if self._pull_on_command and self._pull_request is not None:
            self._command_arrived = bool(chunk)  # lost: the pull comes before anything is obeyed
            return
        self._cmd_buf += chunk
        while True:
            nl = self._cmd_buf.find(b"\n")
            if nl < 0:
                if len(self._cmd_buf) > 4096:
                    self._cmd_buf.clear()
                return
            line = bytes(self._cmd_buf[:nl])
            del self._cmd_buf[: nl + 1]
            self.commands_seen.append(line)
            self._send_records(self.bench.command_line(line))

    def _unplugged_holding(self, seconds: float, wall0: float, sim0: int) -> None:
        """A pull that loses nothing: everything already sent is read by the host first, then the pty
        goes for `seconds`; the sampler runs on (keeping its pace) and keeps what it sends until the
        port is back."""
        bench = self.bench
        end = time.monotonic() + 10.0
        quiet_since = None  # the kernel's own buffers are not all counted: wait for a quiet moment
        while time.monotonic() < end and not self._stop.is_set():
            self._flush()
            if self._backlog or self._unread():
                quiet_since = None
            elif quiet_since is None:
                quiet_since = time.monotonic()
            elif time.monotonic() - quiet_since > 0.2:
                break
            time.sleep(0.002)
        start = time.time()
        self._close_pty()
        kept = bytearray()

        def run_on() -> None:
            target = sim0 + int((time.monotonic() - wall0) * self.speed * 1e9)
            step = min(target, bench.now_ns + int(STEP_WALL_S * self.speed * 1e9))
            if step > bench.now_ns:
                kept.extend(bench.step_bytes(step))
            time.sleep(0.005)

        end_wall = time.monotonic() + seconds
        while not self._stop.is_set() and time.monotonic() < end_wall:
            run_on()
        self._open_pty()
        # until the host has finished opening the new port (its reconnect takes a moment), the sampler
        # keeps on holding what it sends: not on a time (SETTLE_S), as the open's own input clear
        # would throw away what came before it, however late a loaded host gets to it
        end_wall = time.monotonic() + 60.0
        while not self._stop.is_set() and not self._host_ready and time.monotonic() < end_wall:
            self._poll_open()
            run_on()
        self._backlog += kept
        self._last_progress = time.monotonic()  # a reader stuck since now, not since before the pull
        self.outages.append((start, time.time()))

    def _poll_open(self) -> None:
        """Notice the host opening the port (commands it sends then are answered later)."""
        chunk = self._read_master()
        if chunk:
            self._cmd_buf += chunk

    def _unread(self) -> int:
        """Bytes written to the port that its reader has not read yet."""
        try:
            fd = os.open(self.slave_name, os.O_RDONLY | os.O_NOCTTY | os.O_NONBLOCK)
        except OSError:
            return 0
        try:
            return struct.unpack("i", fcntl.ioctl(fd, termios.FIONREAD, b"\0\0\0\0"))[0]
        except OSError:
            return 0
        finally:
            os.close(fd)

    def _unread_settled(self, window_s: float = 0.1) -> int:
        """`_unread` once the kernel has handed on the last write: bytes written to a pty master wait
        in a buffer of its own until a kernel worker moves them to the reader's queue, and only that
        queue is counted. Right after a write the count is short about one time in five (more under
        load: a pull then undercounted what went with the cable, seen as 8 edges in a suite run). The
        largest count over a short quiet window is taken: the host reading meanwhile only lowers it,
        so what it reports lost is never less than what was."""
        most = self._unread()
        end = time.monotonic() + window_s
        while time.monotonic() < end:
            time.sleep(0.005)
            most = max(most, self._unread())
        return most

    def _unplugged(self, seconds: float, powers_off: bool, wall0: float, sim0: int) -> None:
        """The cable is out for `seconds` of wall time: the pty goes; a self-powered sampler runs on
        unheard (keeping its pace), a bus-powered one is off and comes back reset."""
        bench = self.bench
        start, start_mono = time.time(), time.monotonic()
        read = self.bytes_written - self._unread_settled()  # stream offset the host has read up to
        self.edges_in_flight_at_pulls.append(
            sum(e for end, e in self._marks if end > read) + sum(e for *_, e in self._held)
        )
        self._marks.clear()
        self.bytes_lost_unplugged += len(self._backlog) + sum(len(d) for _, d, _, _ in self._held)
        self._backlog.clear()
        self._held.clear()
        self._cmd_buf.clear()
        self._close_pty()
        end_wall = time.monotonic() + seconds
        while not self._stop.is_set() and time.monotonic() < end_wall:
            if not powers_off:
                target = sim0 + int((time.monotonic() - wall0) * self.speed * 1e9)
                step = min(target, bench.now_ns + int(STEP_WALL_S * self.speed * 1e9))
                if step > bench.now_ns:
                    self.bytes_lost_unplugged += len(bench.step_bytes(step))
            time.sleep(0.005)
        if powers_off:
            # off for as long as the cable was out (not for however far the simulation lagged the wall
            # clock before the pull: on a loaded machine that lag is seconds of sampler time)
            off_ns = int((time.monotonic() - start_mono) * self.speed * 1e9)
            self._send_records(bench.power_cycle(off_ns))
        self._open_pty()
        self.outages.append((start, time.time()))


def _edges_in(records: list) -> int:
    return sum(len(r) for r in records if isinstance(r, Edges))
