"""Time single edits of a large inventory through the HTTP API (incremental edits).

Builds an inventory of N terms (two senses each, one example per sense) in a
fresh database, then times each kind of one-item edit a curator makes, several
times over, through the real app (FastAPI TestClient, real database):

    .venv/bin/python research/bench_inventory_edit.py --terms 10000 --repeat 5
    .venv/bin/python research/bench_inventory_edit.py --database-url postgresql+psycopg://...

Prints the median and the slowest of each edit in milliseconds. Not a test: the
figures depend on the machine and what else runs on it.
"""

from __future__ import annotations

import argparse
import os
import statistics
import tempfile
import time
from pathlib import Path
from typing import Any

os.environ.setdefault("HF_HUB_OFFLINE", "1")

from fastapi.testclient import TestClient

from service.api.app import create_app
from service.config import Settings
from service.store import database
from service.store.inventories import create_inventory
from service.store.keys import create_key
from service.store.teams import ensure_team


def big_inventory(terms: int) -> dict[str, Any]:
    return {
        "format": "whichsense.inventory/1",
        "name": "big",
        "terms": [
            {
                "term": f"term{t}",
                "senses": [
                    {
                        "id": f"term{t}.{s}",
                        "gloss": f"sense {s} of term number {t}, written out at some length",
                        "examples": [f"An example where term{t} means sense {s}."],
                        "tags": [f"dept:{t % 50}"],
                    }
                    for s in (1, 2)
                ],
            }
            for t in range(terms)
        ],
    }


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--terms", type=int, default=10_000)
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--database-url", help="default: a SQLite file in a temporary folder")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as folder:
        url = args.database_url or f"sqlite:///{Path(folder) / 'bench.db'}"
        database.upgrade(url)
        settings = Settings(database_url=url, cache_dir=Path(folder) / "cache")
        started = time.perf_counter()
        with database.session_scope(settings) as session:
            team_id = ensure_team(session, "default").id
            create_inventory(
                session,
                team_id,
                big_inventory(args.terms),
                defaults=settings.inventory_defaults(),
                settings=settings,
            )
            token = create_key(session, team_id, "admin").token
        took = time.perf_counter() - started
        print(f"created {args.terms} terms in {took:.1f} s ({url.split(':')[0]})")
        headers = {"Authorization": f"Bearer {token}"}
        middle = args.terms // 2
        with TestClient(create_app(settings)) as client:
            edits = {
                "add example": lambda i: client.post(
                    f"/v1/inventories/big/senses/term{middle}.1/examples",
                    json={"text": f"Another term{middle} example, number {i}."},
                    headers=headers,
                ),
                "patch sense gloss": lambda i: client.patch(
                    f"/v1/inventories/big/senses/term{middle}.2",
                    json={"gloss": f"a reworded gloss, take {i}"},
                    headers=headers,
                ),
                "add term": lambda i: client.post(
                    "/v1/inventories/big/terms",
                    json={"term": f"newterm{i}", "senses": [{"id": f"new{i}.1", "gloss": "new"}]},
                    headers=headers,
                ),
                "delete term": lambda i: client.delete(
                    f"/v1/inventories/big/terms/newterm{i}", headers=headers
                ),
                "patch inventory settings": lambda i: client.patch(
                    "/v1/inventories/big",
                    json={"settings": {"review_threshold": 0.5 + i / 100}},
                    headers=headers,
                ),
            }
            for name, edit in edits.items():
                times, cpu = [], []
                for i in range(args.repeat):
                    start, start_cpu = time.perf_counter(), time.process_time()
                    response = edit(i)
                    times.append((time.perf_counter() - start) * 1000)
                    cpu.append((time.process_time() - start_cpu) * 1000)
                    assert response.status_code < 300, response.text
                print(
                    f"{name:26s} wall median {statistics.median(times):7.1f} ms, "
                    f"max {max(times):7.1f} ms; CPU median {statistics.median(cpu):6.1f} ms "
                    f"({args.repeat} edits, {args.terms} terms)"
                )


if __name__ == "__main__":
    main()
