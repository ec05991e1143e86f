"""The lab-page benchmark's load generator (benchmarks/lab_load.py): its arrival schedule is a
Poisson process, its percentiles are the usual ones, and its latencies count queueing (no
coordinated omission). Logic only: nothing here is timed against a target."""

from __future__ import annotations

import asyncio
import random
import sys
from collections import Counter
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from scipy import stats  # type: ignore[import-untyped]

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "benchmarks"))
import lab_load


@pytest.mark.parametrize("rate", [40.0, 5.0], ids=["rate40", "rate5"])
def test_gaps_are_exponential(rate: float) -> None:
    arrivals = lab_load.schedule(rate, 600, 20, 0.2, 1000, 5, random.Random(1))
    times = np.array([a.at_s for a in arrivals])
    gaps = np.diff(np.concatenate([[0.0], times]))
    # the reference: gaps of a Poisson process at `rate` are exponential with mean 1/rate
    assert stats.kstest(gaps, stats.expon(scale=1 / rate).cdf).pvalue > 0.001
    expected = rate * 600  # count ~ Poisson(rate × T): within 5 standard deviations
    assert abs(len(arrivals) - expected) < 5 * expected**0.5
    assert np.all(np.diff(times) >= 0) and times[-1] < 600


def test_users_and_routes_are_spread() -> None:
    arrivals = lab_load.schedule(40, 300, 20, 0.25, 100_000, 7, random.Random(2))
    users = Counter(a.user for a in arrivals)
    # each user's share is uniform: chi-square goodness of fit
    assert stats.chisquare([users[u] for u in range(20)]).pvalue > 0.001
    opens = [a for a in arrivals if a.route == lab_load.OPEN]
    assert stats.binomtest(len(opens), len(arrivals), 0.25).pvalue > 0.001
    assert all(0 <= a.item < 100_000 for a in opens)
    assert all(0 <= a.item < 7 for a in arrivals if a.route == lab_load.ANALYZE)


@pytest.mark.parametrize("q", [50, 95, 99, 0, 100], ids=["median", "p95", "p99", "min", "max"])
def test_percentile_matches_numpy(q: float) -> None:
    values = list(np.random.default_rng(3).lognormal(size=997))
    assert lab_load.percentile(values, q) == pytest.approx(np.percentile(values, q))


class _SerialServer:
    """A fake client whose answers take `service` seconds each, one at a time (a busy server)."""

    def __init__(self, service: float) -> None:
        self.service = service
        self.lock = asyncio.Lock()

    async def _answer(self, *args: Any, **kwargs: Any) -> Any:
        async with self.lock:
            await asyncio.sleep(self.service)

        class Answer:
            status_code = 200

            async def aread(self) -> bytes:
                return b"{}"

        return Answer()

    get = post = _answer


def test_latency_counts_the_wait_behind_earlier_requests() -> None:
    # five requests scheduled at once on a server answering one per 50 ms: the k-th waits for
    # k − 1 others, so its latency is at least k × 50 ms
    server = _SerialServer(0.05)
    users = [lab_load.User("r", "csrf", server)]
    arrivals = [lab_load.Arrival(0.0, 0, lab_load.ANALYZE, 0) for _ in range(5)]
    tallies, _ = asyncio.run(lab_load.run(users, arrivals, ["S"], [b"{}"], measure_from=0.0))
    latencies = sorted(tallies[lab_load.ANALYZE].latencies)
    assert len(latencies) == 5
    for k, latency in enumerate(latencies, start=1):
        assert latency >= k * 0.05 * 0.95


def test_latency_counts_a_late_send() -> None:
    # the first answer stalls the generator for 0.3 s (as a blocked event loop or a full
    # connection pool would): the request scheduled at 0.1 s goes out late, and its latency,
    # measured from the scheduled time (no coordinated omission), includes the 0.2 s it waited
    import time

    class Stalling(_SerialServer):
        calls = 0

        async def _answer(self, *args: Any, **kwargs: Any) -> Any:
            Stalling.calls += 1
            if Stalling.calls == 1:
                time.sleep(0.3)  # blocks the whole event loop on purpose
            return await super()._answer()

        get = post = _answer

    users = [lab_load.User("r", "csrf", Stalling(0.001))]
    arrivals = [lab_load.Arrival(t, 0, lab_load.OPEN, 0) for t in (0.0, 0.1)]
    tallies, _ = asyncio.run(lab_load.run(users, arrivals, ["S"], [b"{}"], measure_from=0.05))
    (latency,) = tallies[lab_load.OPEN].latencies
    assert latency >= 0.19
    assert tallies[lab_load.OPEN].send_lag[0] >= 0.19


def test_warm_up_is_not_measured_and_errors_are_counted() -> None:
    class Refusing(_SerialServer):
        async def _answer(self, *args: Any, **kwargs: Any) -> Any:
            raise ConnectionError("refused")  # the server is gone: an error, not a crash

        get = post = _answer

    users = [lab_load.User("r", "csrf", Refusing(0))]
    arrivals = [
        lab_load.Arrival(0.0, 0, lab_load.OPEN, 0),  # in the warm-up: not counted
        lab_load.Arrival(0.05, 0, lab_load.OPEN, 0),
    ]
    tallies, _ = asyncio.run(lab_load.run(users, arrivals, ["S"], [b"{}"], measure_from=0.01))
    assert tallies[lab_load.OPEN].errors == {"ConnectionError": 1}
    assert tallies[lab_load.OPEN].latencies == []
