"""Ingest: a sampler's live feed, composing the link (bytes), wire (records) and clock (run time).

`Feed(url)` is what recording and watching read: `poll(timeout) -> Timed`, `batches()`, `send(cmd)`,
`start_cycling(plans)`, `counters` (`FeedCounters`). `CaptureFeed(path)` reads a capture file the same
way (nothing sent; the sampler's beats pace the host clock).
"""

from benchlog.ingest._capture import CaptureFeed
from benchlog.ingest._feed import Feed, FeedCounters, empty_timed, merge_timed

__all__ = ["CaptureFeed", "Feed", "FeedCounters", "merge_timed", "empty_timed"]
