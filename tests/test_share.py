"""Work shared with forked copies of the process (``tracking.share``)."""

from __future__ import annotations

import itertools
import os
import sys

import numpy as np
import pytest

from tracking.share import Shared, split_costs, worker_count

# worker_count forks nothing from Python 3.12 on (tracking.share.worker_count).
FORKS = pytest.mark.skipif(sys.version_info >= (3, 12), reason="no fork from Python 3.12 on")


def _makespan(costs, groups) -> float:
    return max(sum(costs[i] for i in g) for g in groups)


@pytest.mark.parametrize("parts", [2, 3])
def test_split_costs_is_within_grahams_bound_of_the_best_split(parts):
    # Graham 1969 ("Bounds on multiprocessing timing anomalies", SIAM J. Appl. Math. 17):
    # longest processing time first finishes within (4/3 - 1/(3 m)) of the best schedule on m
    # machines. The best is found here by trying every assignment (small n).
    rng = np.random.default_rng(parts)
    for _ in range(40):
        n = int(rng.integers(1, 8))
        costs = [float(c) for c in rng.integers(1, 20, n)]
        groups = split_costs(costs, parts)
        assert sorted(i for g in groups for i in g) == list(range(n))
        assert all(g == sorted(g) for g in groups)
        best = min(_makespan(costs, [[i for i in range(n) if a[i] == k] for k in range(parts)])
                   for a in itertools.product(range(parts), repeat=n))
        assert _makespan(costs, groups) <= (4 / 3 - 1 / (3 * parts)) * best + 1e-9
    with pytest.raises(ValueError, match="parts"):
        split_costs([1.0], 0)


def _bump(item: dict, arg: int):
    """Changes the item it is given and answers with what it holds now and where it ran."""
    item["n"] += arg * item["k"]
    return item["k"], item["n"], os.getpid()


@FORKS
def test_shared_map_answers_as_one_process_in_the_items_order():
    # Each item keeps its own changes from one map to the next in the process that holds it,
    # and the answers come back in the items' order: what one process computes.
    items = [{"k": k, "n": 0} for k in range(7)]
    serial = [dict(i) for i in items]
    with Shared(_bump, items, [1.0] * 7, workers=2) as pool:
        assert pool.forked == 1
        for arg in (1, 5, 2):
            got = pool.map(arg)
            want = [_bump(i, arg) for i in serial]
            assert [g[:2] for g in got] == [w[:2] for w in want]
        # Some answers came from the forked copy, the rest from here.
        assert os.getpid() in {g[2] for g in got}
        assert len({g[2] for g in got}) == 2


def test_nothing_is_forked_for_one_worker_or_little_work():
    items = [{"k": k, "n": 0} for k in range(4)]
    with Shared(_bump, items, [1.0] * 4, workers=1) as pool:
        assert pool.forked == 0
        assert [g[:2] for g in pool.map(1)] == [(k, k) for k in range(4)]
    with Shared(_bump, items, [1.0] * 4, workers=2, min_cost=5.0) as pool:
        assert pool.forked == 0
    assert worker_count(1) == 1
    assert worker_count(3) == 3


def _dies_in_the_copy(item: dict, arg: int):
    """Ends the forked copy that runs it (as the system's out-of-memory killer might)."""
    if os.getpid() != item["parent"]:
        os._exit(1)
    return item["k"] * arg


@FORKS
def test_a_copy_that_dies_has_its_share_run_here():
    items = [{"k": k, "parent": os.getpid()} for k in range(6)]
    with Shared(_dies_in_the_copy, items, [1.0] * 6, workers=2) as pool:
        assert pool.forked == 1
        assert pool.map(3) == [3 * k for k in range(6)]
        assert pool.forked == 0  # dropped; its items are run here from now on
        assert pool.map(2) == [2 * k for k in range(6)]
