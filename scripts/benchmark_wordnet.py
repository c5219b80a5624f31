"""Run the full WordNet benchmark (SemCor 3.0 -> SemEval-2013 by default) and print figures.

Prints the benchmark table plus throughput (encoded instances per second,
from the timings of a run without cache when --no-cache is given), and writes
the result JSON with --json-out. This is where speed is measured; the tests
only check figures.

    .venv/bin/python scripts/benchmark_wordnet.py --json-out /tmp/semeval.json
"""

from __future__ import annotations

import argparse
import json
import os
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

DATA = Path(__file__).resolve().parents[2] / "shared" / "data"


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--train", type=Path, default=DATA / "semcor30.jsonl.gz")
    parser.add_argument("--test", type=Path, default=DATA / "semeval2013-en.jsonl.gz")
    parser.add_argument("--no-cache", action="store_true")
    parser.add_argument("--limit", type=int)
    parser.add_argument("--json-out", type=Path)
    args = parser.parse_args()

    from service.cli.benchmark import format_table
    from service.config import get_settings, resolve_model_dir
    from service.engine import ContextEncoder
    from service.engine.lexicon import open_wordnet
    from service.evaluation.benchmark import BenchmarkConfig, run_benchmark

    config = BenchmarkConfig()
    encoder = ContextEncoder(resolve_model_dir(get_settings()), layers=config.layers,
                             batch_size=config.batch_size)
    result = run_benchmark(args.train, args.test, config, reader=open_wordnet(),
                           encoder=encoder, limit=args.limit, use_cache=not args.no_cache,
                           log=lambda m: print(m, file=sys.stderr, flush=True))
    print(format_table(result))
    timings = result["timings"]
    train_n = result["train_stats"]["resolved"]
    if not result["cached"]["train"] and timings["encode_train"] > 0:
        print(f"encoding: {train_n / timings['encode_train']:.0f} training instances/s "
              f"on {os.cpu_count()} CPU cores ({encoder.tokens_encoded} tokens in total)")
    if args.json_out:
        args.json_out.write_text(json.dumps(result, indent=1, sort_keys=True), encoding="utf-8")
    return 0


if __name__ == "__main__":
    sys.exit(main())
