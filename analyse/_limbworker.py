"""The limb measurements of a recording, in frame order, here or in a worker process.

:func:`analyse.limb.measure_limbs` takes about two thirds of the measuring loop's time;
the rest (decoding, the Sun's first guess, the horizon) does not depend on its results.
On a machine with two or more cores a long recording's limbs are therefore measured in
one worker process while the main process registers the next frames. The worker sees
the crops in frame order and keeps the previous frame's limbs to start its fits from,
exactly as the sequential loop does, so both give the same numbers.
"""

from __future__ import annotations

import collections
import multiprocessing
import traceback
from typing import Any

from analyse import limb as lb

__all__ = ["LimbMeasurer"]

IN_FLIGHT = 2  # crops sent ahead of the results read back


class _Failure:
    """An exception in the worker, as text (its traceback)."""

    def __init__(self, text: str) -> None:
        self.text = text


def _serve(conn, options) -> None:
    """The worker: measure each crop received until None arrives."""
    previous = None
    while True:
        job = conn.recv()
        if job is None:
            break
        try:
            limbs = lb.measure_limbs(*job, previous=previous, **options)
        except Exception:  # noqa: BLE001 - sent back and raised in the main process
            conn.send(_Failure(traceback.format_exc()))
            continue
        previous = limbs or previous
        conn.send(limbs)
    conn.close()


class LimbMeasurer:
    """``submit`` crops in frame order, read their limbs back in the same order.

    Parameters
    ----------
    parallel : bool
        Measure in a worker process (started with "spawn": the main process runs a
        read-ahead thread, which a fork would copy in an undefined state); otherwise in
        this process, at ``submit``.
    """

    def __init__(self, parallel: bool, **options) -> None:
        self.options = options
        self.pending: collections.deque = collections.deque()
        self.previous: dict[str, lb.ChannelLimb] | None = None
        self.proc = self.conn = None
        if parallel:
            ctx = multiprocessing.get_context("spawn")
            self.conn, child = ctx.Pipe()
            self.proc = ctx.Process(target=_serve, args=(child, options), daemon=True,
                                    name="limbtrace-limbs")
            self.proc.start()
            child.close()

    def submit(self, crop, line, sun) -> None:
        """Queue the limbs of one crop (its line and Sun in crop coordinates)."""
        if self.proc is None:
            limbs = lb.measure_limbs(crop, line, sun, previous=self.previous, **self.options)
            self.previous = limbs or self.previous
            self.pending.append(limbs)
            return
        self.conn.send((crop, line, sun))
        self.pending.append(None)

    def ready(self) -> bool:
        """Whether the oldest result should be read now (to keep the pipe short)."""
        return bool(self.pending) and (self.proc is None or len(self.pending) > IN_FLIGHT)

    def result(self) -> dict[str, lb.ChannelLimb]:
        """The limbs of the oldest crop not yet read back."""
        done = self.pending.popleft()
        if self.proc is None:
            return done
        out: Any = self.conn.recv()
        if isinstance(out, _Failure):
            raise RuntimeError(f"limb measurement failed in the worker process:\n{out.text}")
        return out

    def close(self) -> None:
        if self.proc is not None:
            try:
                self.conn.send(None)
            except OSError:
                pass
            self.proc.join(timeout=10)
            if self.proc.is_alive():
                self.proc.terminate()
            self.conn.close()
            self.proc = None

    def __enter__(self) -> LimbMeasurer:
        return self

    def __exit__(self, *exc) -> None:
        self.close()
