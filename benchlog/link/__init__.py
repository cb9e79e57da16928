"""Serial link: a pyserial URL read in a background thread that reconnects after a pulled cable.

`Link(url)` yields `Chunk(data, host_ns)` and, after each outage, an `Outage(host_start_ns,
host_end_ns, reason, attempts)`, in order; `list_ports()` lists this machine's serial ports.
"""

from benchlog.link._link import Chunk, Link, Outage, PortInfo, list_ports

__all__ = ["Chunk", "Link", "Outage", "PortInfo", "list_ports"]
