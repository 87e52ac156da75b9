"""Client processes for system tests: each posts its batches to one server, in order.

Kept in a module of its own so that ``multiprocessing`` with the spawn start
method can import the worker without importing a test module.
"""

from __future__ import annotations

import multiprocessing as mp
import queue
from dataclasses import dataclass

import httpx

JSON = {"content-type": "application/json"}
REQUEST_TIMEOUT_S = 60.0
JOIN_DEADLINE_S = 120.0


@dataclass(frozen=True)
class Reply:
    client: int
    items: int
    status: int
    body: dict


@dataclass(frozen=True)
class ClientJob:
    client: int
    base_url: str
    path: str
    bodies: list[tuple[int, bytes]]  # (number of items, JSON body)


def _post_all(job: ClientJob, barrier, results) -> None:
    replies = []
    try:
        # Everyone starts together so that batches really overlap in time.
        barrier.wait(timeout=JOIN_DEADLINE_S)
        with httpx.Client(base_url=job.base_url, timeout=REQUEST_TIMEOUT_S) as client:
            for items, body in job.bodies:
                response = client.post(job.path, content=body, headers=JSON)
                try:
                    payload = response.json()
                except ValueError:
                    payload = {"raw": response.text[:500]}
                replies.append(Reply(job.client, items, response.status_code, payload))
    except Exception as exc:  # reported to the parent, which fails the test with it
        results.put(f"client {job.client} failed after {len(replies)} replies: {exc!r}")
        return
    results.put(replies)


def post_from_processes(base_url: str, path: str, per_client: list[list[tuple[int, bytes]]]) -> list[Reply]:
    """Post ``per_client[i]`` from client process i, all processes at once; every reply."""
    ctx = mp.get_context("spawn")  # no inherited engines, sockets or threads
    barrier = ctx.Barrier(len(per_client))
    results = ctx.Queue()
    processes = [
        ctx.Process(target=_post_all, args=(ClientJob(i, base_url, path, bodies), barrier, results))
        for i, bodies in enumerate(per_client)
    ]
    for process in processes:
        process.start()
    replies: list[Reply] = []
    try:
        for _ in processes:
            report = results.get(timeout=JOIN_DEADLINE_S)
            if isinstance(report, str):
                raise AssertionError(report)
            replies.extend(report)
    except queue.Empty:
        raise AssertionError("a client process did not report back in time") from None
    finally:
        for process in processes:
            process.join(timeout=JOIN_DEADLINE_S)
            if process.is_alive():
                process.kill()
    return replies
