"""Work on channels side by side (no science here).

An oxygen logger's channels are independent: their readings are converted, fitted and checked one
channel at a time, as numpy (or Arrow) loops during which the GIL is released. On a machine with
two cores or more, two threads take the channels in turn.
"""

from __future__ import annotations

import os
import threading
from collections.abc import Callable, Sequence
from concurrent.futures import ThreadPoolExecutor
from typing import Any

__all__ = ["each_channel"]

_POOL: ThreadPoolExecutor | None = None
_POOL_LOCK = threading.Lock()
_POOL_PREFIX = "swimlab-channel"


def each_channel(fn: Callable[[Any], Any], channels: Sequence[Any]) -> list[Any]:
    """``[fn(c) for c in channels]``, run on two threads where the machine has two cores.

    The work of a channel is numpy loops over its readings, during which numpy releases the GIL,
    so channels computed side by side take less wall time; results keep the channels' order and
    equal those of the plain loop.
    """
    global _POOL
    nested = threading.current_thread().name.startswith(_POOL_PREFIX)  # no waiting on itself
    if len(channels) < 2 or (os.cpu_count() or 1) < 2 or nested:
        return [fn(c) for c in channels]
    with _POOL_LOCK:
        if _POOL is None:
            _POOL = ThreadPoolExecutor(max_workers=2, thread_name_prefix=_POOL_PREFIX)
    return list(_POOL.map(fn, channels))
