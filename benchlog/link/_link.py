"""A serial link that survives a pulled cable.

pyserial does the work: `serial.serial_for_url` opens the port (device path, pty path, `socket://`,
`rfc2217://`, ...) and `serial.threaded.ReaderThread` runs the read loop, calling our `Protocol`. Each
chunk is stamped with the host's receive time and put on a queue the moment it arrives, so nothing
received before a failure is lost. When the port fails, a supervisor thread records the outage and
reopens the port with exponential backoff; the outage goes into the same queue, in order, once the
port is back (or the link closes).
"""

from __future__ import annotations

import queue
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass

import serial
import serial.threaded

from benchlog.errors import PortError


@dataclass(frozen=True, slots=True)
class Chunk:
    """Bytes as read from the port, and the host's wall clock (`time.time_ns()`) when they arrived."""

    data: bytes
    host_ns: int


@dataclass(frozen=True, slots=True)
class Outage:
    """The port was gone from `host_start_ns` until `host_end_ns` (host wall clock)."""

    host_start_ns: int
    host_end_ns: int
    reason: str
    attempts: int  # reopen attempts it took


@dataclass(frozen=True, slots=True)
class PortInfo:
    device: str
    description: str
    hwid: str


def list_ports() -> list[PortInfo]:
    """Serial ports this machine has (pyserial's `serial.tools.list_ports`)."""
    from serial.tools import list_ports as lp

    return [PortInfo(p.device, p.description or "", p.hwid or "") for p in sorted(lp.comports())]


def _reason(exc: BaseException | None) -> str:
    if exc is None:
        return "port closed"
    inner = exc.__context__
    if isinstance(inner, OSError) and inner.strerror:
        return inner.strerror
    text = " ".join(str(exc).split())
    return text or type(exc).__name__


class _Receiver(serial.threaded.Protocol):
    """Stamps and queues every chunk; on loss, tells the link instead of raising."""

    def __init__(self, link: Link) -> None:
        self.link = link

    def data_received(self, data: bytes) -> None:
        self.link._received(data)

    def connection_lost(self, exc: BaseException | None) -> None:  # base class re-raises
        self.link._lost(exc)


class _ReaderThread(serial.threaded.ReaderThread):
    """pyserial's reader thread, but a pulled cable ends it through `connection_lost`.

    pyserial's loop catches only `SerialException`, while `in_waiting` on a vanished tty raises a bare
    `OSError` (EIO): the thread then dies with a traceback and nobody reconnects. This loop is the same
    one with that error caught too.
    """

    def run(self) -> None:
        if not hasattr(self.serial, "cancel_read"):
            self.serial.timeout = 1
        self.protocol = self.protocol_factory()
        try:
            self.protocol.connection_made(self)
        except Exception as exc:
            self.alive = False
            self.protocol.connection_lost(exc)
            self._connection_made.set()
            return
        error: BaseException | None = None
        self._connection_made.set()
        while self.alive and self.serial.is_open:
            try:
                data = self.serial.read(self.serial.in_waiting or 1)
            except (serial.SerialException, OSError, TypeError, AttributeError) as exc:
                # TypeError / AttributeError: pyserial's posix port after close() from another thread
                error = exc
                break
            if data:
                try:
                    self.protocol.data_received(data)
                except Exception as exc:
                    error = exc
                    break
        self.alive = False
        self.protocol.connection_lost(error)
        self.protocol = None


class Link:
    """Reads a pyserial URL in the background; use as a context manager.

    `get(timeout)` returns the next `Chunk` or `Outage` (None on timeout). `write(data)` sends bytes
    to the sampler. `wait_s` is how long the first open keeps retrying before `PortError`;
    `on_connect` is called after the first open and after every reconnection (pyserial discards what
    the port buffered before it opened, so this is where a host asks the sampler to announce itself).
    """

    def __init__(
        self,
        url: str,
        *,
        baudrate: int = 115200,
        wait_s: float = 0.0,
        backoff_s: tuple[float, float] = (0.02, 1.0),
        on_connect: Callable[[], None] | None = None,
    ) -> None:
        self.url = url
        self.on_connect = on_connect
        self.baudrate = baudrate
        self.wait_s = wait_s
        self.backoff_s = backoff_s
        self._queue: queue.SimpleQueue[Chunk | Outage] = queue.SimpleQueue()
        self._reader: _ReaderThread | None = None
        self._lost_event = threading.Event()
        self._lost_at = 0
        self._lost_reason = ""
        self._closing = threading.Event()
        self._supervisor: threading.Thread | None = None
        self._write_lock = threading.Lock()
        self.bytes_in = 0
        self.chunks_in = 0
        self.bytes_out = 0
        self.outages: list[Outage] = []
        self.down_since_ns: int | None = None

    # -- lifecycle ---------------------------------------------------------------------------------
    def __enter__(self) -> Link:
        self.open()
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def _open_port(self) -> serial.SerialBase:
        try:
            port = serial.serial_for_url(self.url, baudrate=self.baudrate, timeout=1, do_not_open=True)
            port.open()
        except (serial.SerialException, OSError, ValueError) as exc:
            raise PortError(f"cannot open {self.url}: {_reason(exc)}") from exc
        return port

    def open(self) -> None:
        deadline = time.monotonic() + self.wait_s
        delay = self.backoff_s[0]
        while True:
            try:
                port = self._open_port()
                break
            except PortError:
                if time.monotonic() + delay > deadline:
                    raise
                time.sleep(delay)
                delay = min(delay * 2, self.backoff_s[1])
        self._start_reader(port)
        self._supervisor = threading.Thread(target=self._supervise, name="benchlog-link", daemon=True)
        self._supervisor.start()
        self._connected_hook()

    def _connected_hook(self) -> None:
        if self.on_connect is not None:
            try:
                self.on_connect()
            except Exception:  # a failed greeting must not stop the link; the next reconnect retries
                pass

    def close(self) -> None:
        self._closing.set()
        self._lost_event.set()
        reader = self._reader
        if reader is not None:
            try:
                reader.close()
            except Exception:  # the port may already be gone
                pass
        if self._supervisor is not None:
            self._supervisor.join(5)

    @property
    def connected(self) -> bool:
        return self._reader is not None and self._reader.alive and self.down_since_ns is None

    # -- reader callbacks (reader thread) ----------------------------------------------------------
    def _received(self, data: bytes) -> None:
        self._queue.put(Chunk(bytes(data), time.time_ns()))
        self.bytes_in += len(data)
        self.chunks_in += 1

    def _lost(self, exc: BaseException | None) -> None:
        self._lost_at = time.time_ns()
        self._lost_reason = _reason(exc)
        self._lost_event.set()

    # -- supervisor --------------------------------------------------------------------------------
    def _start_reader(self, port: serial.SerialBase) -> None:
        self._lost_event.clear()
        reader = _ReaderThread(port, lambda: _Receiver(self))
        reader.name = "benchlog-link-reader"
        self._reader = reader
        reader.start()
        try:
            reader.connect()
        except RuntimeError:  # lost at once: `_lost` has been told, the supervisor reconnects
            pass

    def _supervise(self) -> None:
        while not self._closing.is_set():
            self._lost_event.wait()
            if self._closing.is_set():
                return
            start, reason = self._lost_at, self._lost_reason
            self.down_since_ns = start
            old = self._reader
            if old is not None:
                try:
                    old.serial.close()
                except Exception:
                    pass
            attempts, delay = 0, self.backoff_s[0]
            while not self._closing.is_set():
                attempts += 1
                try:
                    port = self._open_port()
                except PortError:
                    self._closing.wait(delay)
                    delay = min(delay * 2, self.backoff_s[1])
                    continue
                # the outage goes on the queue before any chunk the new reader receives
                outage = Outage(start, time.time_ns(), reason, attempts)
                self.outages.append(outage)
                self._queue.put(outage)
                self._start_reader(port)
                self.down_since_ns = None
                self._connected_hook()
                break
            else:
                outage = Outage(start, time.time_ns(), reason, attempts)
                self.outages.append(outage)
                self._queue.put(outage)

    # -- consumer side -----------------------------------------------------------------------------
    def get(self, timeout: float | None = None) -> Chunk | Outage | None:
        try:
            return self._queue.get(timeout=timeout) if timeout else self._queue.get_nowait()
        except queue.Empty:
            return None

    def drain(self, timeout: float | None = None, max_items: int = 100_000) -> list[Chunk | Outage]:
        """Everything queued now (waiting up to `timeout` for the first item)."""
        first = self.get(timeout)
        if first is None:
            return []
        items = [first]
        while len(items) < max_items:
            try:
                items.append(self._queue.get_nowait())
            except queue.Empty:
                break
        return items

    def write(self, data: bytes) -> None:
        """Send bytes to the sampler; `PortError` while the port is down."""
        reader = self._reader
        if reader is None or not self.connected:
            raise PortError(f"cannot send to {self.url}: the port is not connected")
        try:
            with self._write_lock:
                reader.write(data)
        except (serial.SerialException, OSError) as exc:
            raise PortError(f"cannot send to {self.url}: {_reason(exc)}") from exc
        except (TypeError, AttributeError, ValueError) as exc:
            # the reader closed the port (cable pulled) while this write waited: pyserial's descriptor is
            # gone under it (seen: TypeError from select on a closed port)
            raise PortError(f"cannot send to {self.url}: the port closed during the write") from exc
        self.bytes_out += len(data)
