"""Real-time load: 50 devices posting one reading a second each, on PostgreSQL.

Creates a scratch PostgreSQL database (dropped at the end), migrates it, makes one site
with 50 stations and a device key each, and starts ``spatline serve --workers 2`` on a
free loopback port. A second process runs the devices: each posts one reading per
second (``POST /api/v1/readings``, a single reading object) for 2 minutes (``--quick``:
30 s), on its own schedule, and records each request's latency and any error (non-2xx,
a reading not accepted, or a transport error). Loopback only; the loop is bounded by
count and time.

Goal (issue 6): p99 latency under 100 ms and no errors.

The server is found at ``SPATLINE_BENCH_POSTGRES_URL`` (default
``postgresql+psycopg://postgres@127.0.0.1:5432/postgres``, used only to create and drop
the scratch database); the benchmark is skipped with a message when it does not answer.
"""

from __future__ import annotations

import asyncio
import datetime as dt
import multiprocessing
import os
import secrets
import time

import numpy as np

from bench._support import QUICK, load_average, make_site, serving

DEVICES = 50
SECONDS = 30 if QUICK else 120
RATE_PER_DEVICE = 1.0  # readings per second
P99_GOAL_MS = 100.0
# How far past the 2 minutes a device may keep sending when the server falls behind.
GRACE_SECONDS = 30
ADMIN_URL = os.environ.get(
    "SPATLINE_BENCH_POSTGRES_URL", "postgresql+psycopg://postgres@127.0.0.1:5432/postgres"
)


def _device(base: str, key: str, number: int, results: list, errors: list) -> asyncio.Task:
    import httpx

    async def run(client: httpx.AsyncClient) -> None:
        loop = asyncio.get_running_loop()
        # Devices start spread over the first second, as independent clocks would.
        start = loop.time() + number / DEVICES
        stamp0 = dt.datetime.now(dt.UTC).replace(microsecond=0)
        rng = np.random.default_rng(number)
        ticks = int(SECONDS * RATE_PER_DEVICE)
        for tick in range(ticks):
            if loop.time() > start + SECONDS + GRACE_SECONDS:
                # The server has fallen this far behind: stop, and count what was not sent.
                errors.extend(["not sent: the server fell behind"] * (ticks - tick))
                return
            await asyncio.sleep(max(0.0, start + tick / RATE_PER_DEVICE - loop.time()))
            reading = {
                "reading_id": f"d{number}-{tick}",
                "observed_at": (stamp0 + dt.timedelta(seconds=tick)).isoformat(),
                "temperature_c": round(12.0 + 0.05 * rng.standard_normal(), 3),
                "salinity": round(31.0 + 0.02 * rng.standard_normal(), 3),
                "ph": round(7.85 + 0.005 * rng.standard_normal(), 4),
                "ph_scale": "nbs",
            }
            began = time.perf_counter()
            try:
                answer = await client.post(
                    "/api/v1/readings", json=reading, headers={"Authorization": f"Bearer {key}"}
                )
                elapsed = time.perf_counter() - began
                if answer.status_code != 200 or answer.json().get("accepted") != 1:
                    errors.append(f"{answer.status_code}: {answer.text[:200]}")
            except httpx.HTTPError as error:
                elapsed = time.perf_counter() - began
                errors.append(f"{type(error).__name__}: {error}")
            results.append(elapsed)

    return run


def _client_process(base: str, keys: list[str], queue: multiprocessing.Queue) -> None:
    import httpx

    async def main() -> tuple[list[float], list[str]]:
        results: list[float] = []
        errors: list[str] = []
        limits = httpx.Limits(max_connections=DEVICES, max_keepalive_connections=DEVICES)
        async with httpx.AsyncClient(base_url=base, timeout=10.0, limits=limits) as client:
            runs = [
                _device(base, key, number, results, errors)(client)
                for number, key in enumerate(keys)
            ]
            await asyncio.gather(*runs)
        return results, errors

    queue.put(asyncio.run(main()))


def _postgres_answers() -> bool:
    import psycopg

    try:
        with psycopg.connect(_libpq(ADMIN_URL), connect_timeout=3):
            return True
    except psycopg.Error:
        return False


def _libpq(url: str) -> str:
    return url.replace("postgresql+psycopg://", "postgresql://", 1)


def main() -> bool | None:
    import psycopg

    if not _postgres_answers():
        print(f"skipped: PostgreSQL does not answer at {ADMIN_URL.split('@')[-1]}")
        return None
    name = f"spatline_bench_{secrets.token_hex(4)}"
    with psycopg.connect(_libpq(ADMIN_URL), autocommit=True) as admin:
        admin.execute(f"CREATE DATABASE {name}")
    url = ADMIN_URL.rsplit("/", 1)[0] + f"/{name}"
    try:
        site = make_site(url, stations=DEVICES, devices_per_station=1)
        with serving(url, workers=2) as base:
            context = multiprocessing.get_context("spawn")
            queue = context.Queue()
            process = context.Process(target=_client_process, args=(base, site.device_keys, queue))
            process.start()
            try:
                # Each device stops by itself GRACE_SECONDS after its last slot, and its
                # last request times out after 10 s.
                results, errors = queue.get(timeout=SECONDS + GRACE_SECONDS + 60)
            finally:
                process.join(timeout=30)
                if process.is_alive():
                    process.kill()
            load = load_average()
    finally:
        with psycopg.connect(_libpq(ADMIN_URL), autocommit=True) as admin:
            admin.execute(f"DROP DATABASE IF EXISTS {name} WITH (FORCE)")

    if not results:
        print(f"no request answered; errors: {sorted(set(errors))[:5]}")
        return False
    latencies = np.array(results) * 1000.0
    p50, p99 = np.percentile(latencies, [50, 99])
    met = bool(p99 < P99_GOAL_MS and not errors)
    print(load)
    print(
        f"{DEVICES} devices x {RATE_PER_DEVICE:g} reading/s for {SECONDS} s against "
        f"spatline serve --workers 2 on PostgreSQL: {len(latencies)} requests"
    )
    print(
        f"latency p50 {p50:.1f} ms, p99 {p99:.1f} ms, max {latencies.max():.1f} ms "
        f"(goal p99 < {P99_GOAL_MS:g} ms); errors {len(errors)} (goal 0)"
    )
    for error in sorted(set(errors))[:5]:
        print(f"  error: {error}")
    print("met" if met else "MISSED")
    return met


if __name__ == "__main__":
    main()
