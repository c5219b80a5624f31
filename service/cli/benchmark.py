"""`whichsense benchmark wordnet --train FILE --test FILE`: F1 against WordNet-annotated text."""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from service.config import Settings
    from service.evaluation.benchmark import BenchmarkConfig


def add_parser(commands: argparse._SubParsersAction) -> None:
    parser = commands.add_parser("benchmark", help="measure disambiguation on annotated text")
    suites = parser.add_subparsers(dest="suite", metavar="SUITE", required=True)
    wordnet = suites.add_parser(
        "wordnet",
        help="train on one WordNet-annotated corpus, score F1 on another",
        description="Build sense prototypes from TRAIN, decide every TEST instance among the "
        "WordNet senses of its lemma and part of speech, and print F1 (unified evaluation "
        "framework) overall and per part of speech, with the most-frequent-sense and "
        "first-sense baselines on the same data. Encodings are cached on disk.",
    )
    wordnet.add_argument("--train", type=Path, required=True, help="training corpus (.jsonl.gz)")
    wordnet.add_argument("--test", type=Path, required=True, help="test corpus (.jsonl.gz)")
    wordnet.add_argument("--limit", type=int, metavar="N", help="score the first N test instances")
    wordnet.add_argument("--train-limit", type=int, metavar="N",
                         help="use the first N training sentences")
    wordnet.add_argument("--json", action="store_true",
                         help="end with one line holding every figure as a JSON object")
    wordnet.add_argument("--layers",
                         help="hidden layers to pool, e.g. 6 or 3,4,5,6 (default: the last)")
    wordnet.add_argument("--no-sense-prior", action="store_true",
                         help="turn off the engine's sense prior from evidence counts")
    wordnet.add_argument("--head", metavar="ID_OR_FILE",
                         help="an alignment head: a bundled head id or a head file "
                         "(default: none)")
    wordnet.add_argument("--no-cache", action="store_true", help="do not read or write the cache")
    wordnet.add_argument("--no-variants", action="store_true",
                         help="skip the engine variants scored for comparison")
    wordnet.add_argument("--no-previous", action="store_true",
                         help="skip the previous twin scorer's F1")
    wordnet.set_defaults(func=run)


def _layers(args: argparse.Namespace) -> tuple[int, ...]:
    from service.evaluation.benchmark import BenchmarkConfig

    if not args.layers:
        return BenchmarkConfig().layers
    return tuple(int(part) for part in str(args.layers).split(",") if part.strip())


def _config(args: argparse.Namespace, model_id: str) -> BenchmarkConfig:
    from service.engine.alignment import bundled_head, load_head
    from service.evaluation.benchmark import BenchmarkConfig, EngineOptions

    layers = _layers(args)
    head = None
    if args.head:
        head = (load_head(args.head, model_id) if Path(args.head).is_file()
                else bundled_head(args.head, model_id))
    prior = "" if args.no_sense_prior else EngineOptions.sense_prior_pos
    engine = EngineOptions(sense_prior_pos=prior, head=head)
    return BenchmarkConfig(layers=layers, engine=engine)


def format_table(result: dict[str, Any]) -> str:
    """The human-readable summary printed before the JSON line."""
    lines = [
        f"test {result['test_file']} ({result['n']} instances), "
        f"train {result['train_file']}",
        f"{'':24}{'F1':>8}",
        f"{'whichsense (engine)':24}{result['f1']:8.2f}",
        *([f"{'previous twin scorer':24}{result['previous_engine_f1']:8.2f}"]
          if "previous_engine_f1" in result else []),
        f"{'MFS in training file':24}{result['mfs_f1']:8.2f}",
        f"{'WordNet first sense':24}{result['first_sense_f1']:8.2f}",
        "per part of speech (ours / MFS, n): " + ", ".join(
            f"{pos} {f1:.2f} / {result['mfs_per_pos'].get(pos, 0.0):.2f} "
            f"({result['per_pos_n'][pos]})" for pos, f1 in result["per_pos"].items()),
        f"coverage {result['coverage']:.4f}; temperature {result['temperature']:.4f} "
        f"(fitted on {result['calibration_instances']} held-out training instances, "
        f"F1 there {result['held_out_f1']:.2f}); ECE {result['ece']}",
    ]
    for target, point in result["auto_share_at"].items():
        share = (f"{point['share']:.1%} assigned automatically (threshold "
                 f"{point['threshold']:.3f})") if point else "not reachable"
        lines.append(f"at {float(target):.0%} accuracy: {share}")
    for target, point in result["held_out_thresholds_on_test"].items():
        if point:
            lines.append(f"threshold reaching {float(target):.0%} on held-out training documents "
                         f"({point['threshold']:.3f}) on the test set: {point['share']:.1%} "
                         f"assigned, accuracy {point['accuracy']:.3f}")
    for name, f1 in result.get("variants", {}).items():
        lines.append(f"  variant {name:40} {f1:6.2f}")
    stats = result["train_stats"]
    lines.append(f"training labels not resolvable in this WordNet: "
                 f"{stats['skipped_unresolved']} instances skipped "
                 f"({stats['recovered_by_splitting']} more recovered by splitting packed keys)")
    lines.append("timings (s): " + ", ".join(f"{k} {v}" for k, v in result["timings"].items())
                 + f"; total {result['seconds']}")
    return "\n".join(lines)


def run(args: argparse.Namespace, settings: Settings) -> int:
    from service.config import resolve_model_dir
    from service.engine import ContextEncoder, EngineError
    from service.engine.lexicon import open_wordnet
    from service.evaluation.benchmark import BenchmarkConfig, run_benchmark

    for path in (args.train, args.test):
        if not path.is_file():
            print(f"whichsense: no such file: {path}", file=sys.stderr)
            return 2
    print("whichsense benchmark: loading the model and WordNet ...", file=sys.stderr, flush=True)
    encoder = ContextEncoder(resolve_model_dir(settings), layers=_layers(args),
                             batch_size=BenchmarkConfig.batch_size,
                             num_threads=settings.torch_threads)
    try:
        config = _config(args, encoder.model_id)
    except EngineError as error:
        print(f"whichsense: {error}", file=sys.stderr)
        return 2
    result = run_benchmark(
        args.train, args.test, config, reader=open_wordnet(cache_dir=settings.cache_dir),
        encoder=encoder, limit=args.limit, train_limit=args.train_limit,
        cache_dir=None if args.no_cache else settings.cache_dir,
        variants=not args.no_variants, previous=not args.no_previous,
        log=lambda message: print(message, file=sys.stderr, flush=True),
    )
    print(format_table(result))
    if args.json:
        print(json.dumps(result, sort_keys=True))
    return 0
