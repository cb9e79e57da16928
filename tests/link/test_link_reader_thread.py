"""A pulled cable seen as a bare OSError (EIO) ends the reader through connection_lost."""

from __future__ import annotations

import os
import threading

import pytest
import serial
import serial.threaded

from benchlog.link._link import _ReaderThread


class _Seen(serial.threaded.Protocol):
    lost: list = []
    done = threading.Event()

    def connection_lost(self, exc):
        _Seen.lost.append(exc)
        _Seen.done.set()


def _port_on_a_vanished_pty():
    master, slave = os.openpty()
    port = serial.serial_for_url(os.ttyname(slave), timeout=0.2)
    os.close(slave)
    os.close(master)  # the far end is gone, as when a USB adapter is pulled
    return port


def test_in_waiting_on_a_vanished_pty_raises_a_bare_oserror():
    # the premise (Linux pty behaviour, common practice, no source): not a SerialException
    port = _port_on_a_vanished_pty()
    with pytest.raises(OSError) as info:
        _ = port.in_waiting
    assert not isinstance(info.value, serial.SerialException)
    port.close()


def test_reader_reports_the_loss_instead_of_dying():
    port = _port_on_a_vanished_pty()
    _Seen.lost.clear()
    _Seen.done.clear()
    reader = _ReaderThread(port, _Seen)
    reader.start()
    assert _Seen.done.wait(5), "the reader thread died without calling connection_lost"
    reader.join(5)
    assert isinstance(_Seen.lost[0], OSError)
    port.close()
