"""Work shared with forked copies of this process, so the event finder uses every core.

After detection, tracking and events run in one process while the machine's other cores idle
(``railtrace.pipeline``). Some of the event finder's work is a list of independent items, one
call each: the departures of the profile over the cloth's sliding deceleration
(``tracking.events._cloth_slide_decel``) and each ball's cushion contacts (its contact solves
touch that ball's samples only). :class:`Shared` splits such a list between this process and
``workers - 1`` forked copies of it. A fork shares every object as it is at that instant, so
nothing is pickled on the way in; each item stays in one process for all its calls, in the
order one process would make them, and the answers come back in the items' order, so what the
caller gets is what one process computes, to the bit.

Forked, not spawned: a spawned process would have to rebuild the caller's state (the tracks,
every ball's samples and fits) from pickles. The fork happens after decoding has ended, and the
copies call nothing but numpy and scipy.
"""

from __future__ import annotations

import multiprocessing
import sys
from typing import Any, Callable, Sequence

from vision.video import usable_cores


def split_costs(costs: Sequence[float], parts: int) -> list[list[int]]:
    """Indices of ``costs`` in ``parts`` groups of near-equal summed cost: each item, costliest
    first, goes to the group with the least so far (longest processing time first, Graham 1969,
    "Bounds on multiprocessing timing anomalies": within 4/3 of the best split). Each group's
    indices ascend, so a process meets its items in their own order."""
    if parts < 1:
        raise ValueError(f"cannot split work into {parts} parts; give at least 1")
    load = [0.0] * parts
    groups: list[list[int]] = [[] for _ in range(parts)]
    for i in sorted(range(len(costs)), key=lambda i: (-costs[i], i)):
        k = min(range(parts), key=lambda k: (load[k], k))
        groups[k].append(i)
        load[k] += costs[i]
    return [sorted(g) for g in groups]


def worker_count(workers: int) -> int:
    """Processes to use: ``workers``, or one per core this process may run on for 0. One
    (no fork) inside a daemonic process, which may not have children, or where the system
    cannot fork, or from Python 3.12 on, which warns (DeprecationWarning) at every fork of a
    process with more than one thread, as numpy's BLAS threads make this one; the results are
    the same either way, only slower."""
    n = int(workers) or usable_cores()
    if multiprocessing.current_process().daemon or "fork" not in multiprocessing.get_all_start_methods() \
            or sys.version_info >= (3, 12):
        return 1
    return max(n, 1)


def start_process(method: str, target: Callable, args: tuple, name: str):
    """``(process, conn)``: a daemonic process, started by ``method`` ("fork" or "spawn"), that
    runs ``target(its_conn, *args)``, and this process's end of the pipe between them."""
    ctx = multiprocessing.get_context(method)
    mine, theirs = ctx.Pipe()
    proc = ctx.Process(target=target, args=(theirs, *args), daemon=True, name=name)
    proc.start()
    theirs.close()
    return proc, mine


def stop_processes(procs: list, conns: list, stop: Any) -> None:
    """Send ``stop`` on each of ``conns`` (a process already gone needs no telling), then join
    each of ``procs`` (one that fails to end in 10 s is terminated) and close its pipe."""
    for conn in conns:
        try:
            conn.send(stop)
        except (OSError, ValueError):
            pass
    for proc, conn in zip(procs, conns):
        proc.join(timeout=10.0)
        if proc.is_alive():
            proc.terminate()
            proc.join()
        conn.close()


class Shared:
    """``fn(item, arg)`` over a list of items, split between this process and forked copies.

    ``items`` with their ``costs`` (any unit, e.g. contacts to solve) are split by
    :func:`split_costs` among ``workers`` processes (:func:`worker_count`); with one process,
    or less than ``min_cost`` of work in all, or fewer than two items, nothing is forked.
    :meth:`map` sends ``arg`` to every copy, runs this process's share meanwhile and returns
    the answers in the items' order. An item's changes to itself or to anything else stay in
    the process that holds it: ``fn`` returns whatever the caller needs back. Use as a context
    manager; :meth:`close` ends the copies. A copy that fails or vanishes has its share run
    here instead (its items untouched here since the fork, so with the same outcome).
    """

    def __init__(self, fn: Callable[[Any, Any], Any], items: Sequence, costs: Sequence[float],
                 workers: int, min_cost: float = 0.0):
        self.fn, self.items = fn, list(items)
        self.conns: list = []
        self.procs: list = []
        n = worker_count(workers)
        if n < 2 or len(self.items) < 2 or sum(costs) < min_cost:
            self.groups = [list(range(len(self.items)))]
            return
        self.groups = [g for g in split_costs(costs, n) if g]
        try:
            for g in self.groups[1:]:
                proc, conn = start_process("fork", _serve, (fn, [self.items[i] for i in g]), "railtrace-share")
                self.conns.append(conn)
                self.procs.append(proc)
        except BaseException:
            self.close()
            raise

    @property
    def forked(self) -> int:
        """How many forked copies share the work."""
        return len(self.procs)

    def map(self, arg: Any = None) -> list:
        """``[fn(item, arg) for item in items]``, each item in the process that holds it."""
        live = []
        for k, conn in enumerate(self.conns):
            try:
                conn.send(arg)
                live.append(k)
            except (OSError, ValueError):  # the copy is gone: its share is run here below
                pass
        out: list = [None] * len(self.items)
        for i in self.groups[0]:
            out[i] = self.fn(self.items[i], arg)
        for k, (conn, g) in enumerate(zip(self.conns, self.groups[1:])):
            answer = None
            if k in live:
                try:
                    answer = conn.recv()
                except (EOFError, OSError):
                    answer = None
            if answer is not None and answer[0] == "ok":
                for i, value in zip(g, answer[1]):
                    out[i] = value
            else:
                # The copy failed or died: run its share here (an error in fn itself then
                # raises here, with its own traceback).
                self._drop(k)
                for i in g:
                    out[i] = self.fn(self.items[i], arg)
        return out

    def _drop(self, k: int) -> None:
        """Stop using copy ``k`` (its items are run here from now on)."""
        g = self.groups.pop(k + 1)
        self.groups[0] = sorted(self.groups[0] + g)
        conn, proc = self.conns.pop(k), self.procs.pop(k)
        conn.close()
        proc.terminate()
        proc.join()

    def close(self) -> None:
        """End every copy (one that fails to end in 10 s is terminated)."""
        stop_processes(self.procs, self.conns, _STOP)
        self.conns, self.procs = [], []

    def __enter__(self) -> "Shared":
        return self

    def __exit__(self, *exc) -> None:
        self.close()


class _Stop:
    """The message that ends a copy (``None`` stays a valid ``arg``)."""


_STOP = _Stop()


def _serve(conn, fn, share: list) -> None:
    """A forked copy's life: for each ``arg`` received, ``("ok", [fn(item, arg) for item in
    share])`` back, or ``("error", text)`` if one failed; ends on ``_STOP`` or a closed pipe."""
    while True:
        try:
            arg = conn.recv()
        except (EOFError, OSError):
            return
        if isinstance(arg, _Stop):
            return
        try:
            answer = ("ok", [fn(item, arg) for item in share])
        except BaseException as exc:  # the caller runs this share itself and meets the error
            answer = ("error", f"{type(exc).__name__}: {exc}")
        try:
            conn.send(answer)
        except (OSError, ValueError):
            return
