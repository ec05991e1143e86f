"""Open-loop load on the lab page's server (run by bench_lab_page.py as its own process).

    python benchmarks/lab_load.py --url http://127.0.0.1:8766 --plan plan.json

Requests arrive as a Poisson process (exponential gaps at ``rate`` per second in all), each one
given to one of the signed-in users at random (the sum of the users' own Poisson streams), and is
sent at its scheduled time whether or not earlier answers came back. Latency is measured from the
SCHEDULED send time, so time spent waiting behind a slow server (or a late generator) counts:
no coordinated omission. The plan file names the users and password, the study ids to open and
the study bodies to analyse; the figures go to standard output as one JSON object.
"""

from __future__ import annotations

import argparse
import asyncio
import json
import math
import random
import sys
import time
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

ANALYZE = "POST /api/analyze"
OPEN = "GET /api/studies/{id}"
ROUTES = (ANALYZE, OPEN)


@dataclass(frozen=True)
class Arrival:
    at_s: float  # seconds after the start of the run
    user: int
    route: str
    item: int  # index into the study ids (OPEN) or bodies (ANALYZE)


def schedule(
    rate: float,
    seconds: float,
    users: int,
    open_share: float,
    ids: int,
    bodies: int,
    rng: random.Random,
) -> list[Arrival]:
    """Poisson arrivals at ``rate``/s over ``seconds``, each to a random user and route."""
    out: list[Arrival] = []
    t = rng.expovariate(rate)
    while t < seconds:
        if rng.random() < open_share:
            route, item = OPEN, rng.randrange(ids)
        else:
            route, item = ANALYZE, rng.randrange(bodies)
        out.append(Arrival(t, rng.randrange(users), route, item))
        t += rng.expovariate(rate)
    return out


def percentile(values: Sequence[float], q: float) -> float:
    """The ``q``-th percentile (0–100) by linear interpolation between order statistics."""
    ordered = sorted(values)
    if not ordered:
        return math.nan
    pos = (len(ordered) - 1) * q / 100
    low = math.floor(pos)
    high = min(low + 1, len(ordered) - 1)
    return ordered[low] + (ordered[high] - ordered[low]) * (pos - low)


@dataclass
class Tally:
    """Latencies (seconds, from the scheduled time) and failures of one route."""

    latencies: list[float] = field(default_factory=list)
    errors: dict[str, int] = field(default_factory=dict)
    send_lag: list[float] = field(default_factory=list)  # actual send − scheduled send
    from_send: list[float] = field(default_factory=list)  # answered − actually sent

    def summary(self, seconds: float) -> dict[str, Any]:
        n = len(self.latencies)
        return {
            "requests": n + sum(self.errors.values()),
            "ok": n,
            "errors": dict(self.errors),
            "achieved_per_s": (n + sum(self.errors.values())) / seconds,
            "median_ms": percentile(self.latencies, 50) * 1000,
            "p95_ms": percentile(self.latencies, 95) * 1000,
            "p99_ms": percentile(self.latencies, 99) * 1000,
            "max_ms": max(self.latencies, default=math.nan) * 1000,
            "send_lag_p95_ms": percentile(self.send_lag, 95) * 1000,
            "from_send_p95_ms": percentile(self.from_send, 95) * 1000,
        }


@dataclass(frozen=True)
class User:
    name: str
    csrf: str
    client: Any  # httpx.AsyncClient holding this user's session cookie


async def sign_in(base: str, names: Sequence[str], password: str) -> list[User]:
    """Sign every user in (POST /api/session), each with their own client and cookie."""
    import httpx

    users = []
    for name in names:
        client = httpx.AsyncClient(
            base_url=base,
            headers={"origin": base},
            timeout=httpx.Timeout(30.0),
            # idle connections are dropped before the server's 5 s keep-alive ends (as browsers
            # do), so a request never races the server closing its connection
            limits=httpx.Limits(
                max_connections=50, max_keepalive_connections=10, keepalive_expiry=4.0
            ),
        )
        answer = await client.post("/api/session", json={"user": name, "password": password})
        if answer.status_code != 200:
            raise SystemExit(f"sign-in of {name} failed: {answer.status_code} {answer.text[:300]}")
        users.append(User(name, answer.json()["csrf_token"], client))
    return users


async def run(
    users: Sequence[User],
    arrivals: Sequence[Arrival],
    ids: Sequence[str],
    bodies: Sequence[bytes],
    *,
    measure_from: float,
) -> tuple[dict[str, Tally], float]:
    """Send every arrival on schedule; tally the ones scheduled at or after ``measure_from``."""
    tallies = {route: Tally() for route in ROUTES}
    loop = asyncio.get_running_loop()
    start = loop.time() + 0.2

    async def one(a: Arrival) -> None:
        scheduled = start + a.at_s
        delay = scheduled - loop.time()
        if delay > 0:
            await asyncio.sleep(delay)
        sent = loop.time()
        user = users[a.user]
        try:
            if a.route == OPEN:
                answer = await user.client.get(f"/api/studies/{ids[a.item]}")
            else:
                answer = await user.client.post(
                    "/api/analyze",
                    content=bodies[a.item],
                    headers={"content-type": "application/json", "x-csrf-token": user.csrf},
                )
            await answer.aread()
            outcome = None if answer.status_code == 200 else f"HTTP {answer.status_code}"
        except Exception as exc:  # a refused or dropped connection is an error, not a crash
            outcome = type(exc).__name__
        done = loop.time()
        if a.at_s < measure_from:
            return
        tally = tallies[a.route]
        tally.send_lag.append(sent - scheduled)
        if outcome is None:
            tally.latencies.append(done - scheduled)
            tally.from_send.append(done - sent)
        else:
            tally.errors[outcome] = tally.errors.get(outcome, 0) + 1

    tasks = [asyncio.create_task(one(a)) for a in arrivals]
    await asyncio.gather(*tasks)
    return tallies, loop.time() - start


async def main_async(args: argparse.Namespace) -> dict[str, Any]:
    plan = json.loads(Path(args.plan).read_text(encoding="utf-8"))
    ids: list[str] = plan["study_ids"]
    bodies = [json.dumps(b).encode() for b in plan["bodies"]]
    rng = random.Random(args.seed)
    total = args.warmup + args.seconds
    arrivals = schedule(
        args.rate, total, len(plan["users"]), args.open_share, len(ids), len(bodies), rng
    )
    users = await sign_in(args.url, plan["users"], plan["password"])
    print("signed in", file=sys.stderr, flush=True)  # bench_lab_page.py starts its CPU count
    t0 = time.perf_counter()
    tallies, _ = await run(users, arrivals, ids, bodies, measure_from=args.warmup)
    wall = time.perf_counter() - t0
    for user in users:
        await user.client.aclose()
    return {
        "rate_per_s": args.rate,
        "open_share": args.open_share,
        "users": len(users),
        "warmup_s": args.warmup,
        "seconds": args.seconds,
        "wall_s": wall,
        "scheduled_per_s": sum(a.at_s >= args.warmup for a in arrivals) / args.seconds,
        "routes": {route: tallies[route].summary(args.seconds) for route in ROUTES},
    }


def main(argv: Sequence[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--url", required=True)
    parser.add_argument("--plan", required=True, help="JSON: users, password, study_ids, bodies")
    parser.add_argument("--rate", type=float, default=40.0, help="requests per second in all")
    parser.add_argument("--seconds", type=float, default=60.0, help="measured seconds")
    parser.add_argument("--warmup", type=float, default=10.0, help="seconds sent, not measured")
    parser.add_argument("--open-share", type=float, default=0.2)
    parser.add_argument("--seed", type=int, default=15)
    args = parser.parse_args(argv)
    json.dump(asyncio.run(main_async(args)), sys.stdout)
    print()


if __name__ == "__main__":
    main()
