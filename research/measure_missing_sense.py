"""Missing-sense scores on the shipped engine: which out-of-inventory score catches most.

For each held-out set (inventory.json + labeled.jsonl), the engine users run
is built through the factory three times: cold (glosses and examples; every id
scored), with the even ids' listed occurrences as evidence (odd ids scored) and
the reverse (even ids scored). For each
candidate score the calibration set is the labeled items of the engine's book
scored leave-one-out (the item is no neighbour of itself), pooled over terms;
an odd id is flagged when its conformal p-value (Bates et al. 2023) is at most
the rate. Prints the realised false-flag rate on odd listed ids, the share of
odd missing-sense ids caught, and AUROC (listed vs missing).

    python -m research.measure_missing_sense INVENTORY LABELED [INVENTORY LABELED ...]
"""

from __future__ import annotations

import argparse
import json
import os
from collections import Counter
from pathlib import Path

import numpy as np

os.environ.setdefault("HF_HUB_OFFLINE", "1")

def nn_distance(items: np.ndarray, vector: np.ndarray, k: int = 1) -> float:
    if not len(items):
        return 1.0
    sims = np.sort(items @ vector)[::-1][:k]
    return 1.0 - float(sims.mean())


def term_parts(book, term: str) -> dict[str, np.ndarray]:  # type: ignore[no-untyped-def]
    items = book._items[term]
    glosses = [i for i, kind in enumerate(items.kinds) if kind == "gloss"]
    gloss_sentences = [items.sentences[i] for i in glosses if items.sentences[i] is not None]
    return {
        "gloss": book.gloss_vectors(term),
        "gloss_sentence": (np.stack(gloss_sentences).astype(np.float64) if gloss_sentences
                           else np.zeros((0, book.dimension))),
        "items": book.contextual_items(term)[0],
        "item_sentences": book.contextual_sentences(term),
    }


def candidate_scores(parts: dict[str, np.ndarray], vector: np.ndarray,
                     sentence: np.ndarray, neighbours: np.ndarray,
                     neighbour_sentences: np.ndarray,
                     engine_best: float) -> dict[str, float]:
    """Each candidate score of one occurrence (larger = stranger)."""
    gloss = nn_distance(parts["gloss"], vector)
    nn = nn_distance(neighbours, vector) if len(neighbours) else gloss
    nn3 = nn_distance(neighbours, vector, 3) if len(neighbours) else gloss
    gloss_s = nn_distance(parts["gloss_sentence"], sentence)
    nn_s = nn_distance(neighbour_sentences, sentence) if len(neighbours) else gloss_s
    return {
        "token gloss+1nn (before)": gloss + nn,
        "sentence gloss+1nn": gloss_s + nn_s,
        "token+sentence gloss+1nn (shipped, w=1)": gloss + nn + gloss_s + nn_s,
        "token+sentence 1nn": nn + nn_s,
        "token+sentence gloss+3nn": gloss + nn3 + gloss_s
        + (nn_distance(neighbour_sentences, sentence, 3) if len(neighbours) else gloss_s),
        "-best engine score": -engine_best,
        "-best engine score + token+sentence": -engine_best + gloss + nn + gloss_s + nn_s,
    }


def evaluate_set(inventory: Path, labeled: Path, rate: float) -> None:
    from service.config import load_settings
    from service.engine import SpanQuery
    from service.evaluation.evidence_source import labeled_evidence, restrict_to_inventory
    from service.evaluation.labeled import read_labeled
    from service.inventory.document import parse_inventory_document
    from service.tagging.engines import build_disambiguator

    settings = load_settings()
    spec = parse_inventory_document(json.loads(inventory.read_text(encoding="utf-8")))
    rows = [json.loads(line) for line in labeled.read_text(encoding="utf-8").splitlines()
            if line.strip()]
    number = [int(row["id"].rsplit("-", 1)[-1]) for row in rows]
    listed = list(read_labeled(labeled, allow_missing=True))
    everyone = list(range(len(rows)))
    plans = [("cold", [], everyone)]
    for parity, label in ((0, "even ids as evidence"), (1, "odd ids as evidence")):
        plans.append((label, [item for item, n in zip(listed, number, strict=True)
                              if n % 2 == parity and not item.missing_sense],
                      [i for i in everyone if number[i] % 2 != parity]))
    totals: dict[tuple[str, str], list[tuple[float, bool]]] = {}
    for name, evidence, test in plans:
        skipped: Counter[str] = Counter()
        supplied = list(restrict_to_inventory(labeled_evidence(evidence), spec, skipped))
        engine = build_disambiguator(settings, spec, supplied)
        book = engine.prototypes
        terms = {t.term.casefold(): t.term for t in spec.terms}
        spans = [SpanQuery(rows[i]["text"], rows[i]["start"], rows[i]["end"],
                           terms[rows[i]["term"].casefold()]) for i in test]
        vectors, sentences = engine.encoder.encode_spans_with_windows(
            [(q.text, q.start, q.end) for q in spans])
        parts = {term: term_parts(book, term) for term in book.terms()}
        best_by_item: dict[tuple[str, int], float] = {}
        counters: dict[str, int] = {}
        for row in book.held_out_rows():
            index = counters.get(row.term, 0)
            counters[row.term] = index + 1
            best_by_item[(row.term, index)] = float(np.max(row.scores))
        calibration: dict[str, list[float]] = {}
        for term, p in parts.items():
            for j in range(len(p["items"])):
                keep = np.arange(len(p["items"])) != j
                scores = candidate_scores(p, p["items"][j], p["item_sentences"][j],
                                          p["items"][keep], p["item_sentences"][keep],
                                          best_by_item[(term, j)])
                for key, value in scores.items():
                    calibration.setdefault(key, []).append(value)
        keys = list(calibration)
        raw: dict[str, list[float]] = {key: [] for key in keys}
        for k, query in enumerate(spans):
            p = parts[query.term]
            engine_scores = book.scores(query.term, book.similarities(query.term, vectors[k]),
                                        sentences[k][None, :])
            scores = candidate_scores(p, vectors[k].astype(np.float64),
                                      sentences[k].astype(np.float64), p["items"],
                                      p["item_sentences"], float(np.max(engine_scores)))
            for key, value in scores.items():
                raw[key].append(value)
        missing = np.array([rows[i]["sense"] is None for i in test])
        # rank-sum combination: each score as its calibration CDF, summed
        cal_sorted = {key: np.sort(np.asarray(calibration[key])) for key in keys}

        def cdf(key: str, values: np.ndarray,
                cal_sorted: dict[str, np.ndarray] = cal_sorted) -> np.ndarray:
            return np.searchsorted(cal_sorted[key], values, side="right") / len(cal_sorted[key])

        for a, b in (("-best engine score", "sentence gloss+1nn"),
                     ("-best engine score", "token+sentence gloss+1nn (shipped, w=1)")):
            key = f"rank({a}) + rank({b})"
            calibration[key] = list(cdf(a, np.asarray(calibration[a]))
                                    + cdf(b, np.asarray(calibration[b])))
            raw[key] = list(cdf(a, np.asarray(raw[a])) + cdf(b, np.asarray(raw[b])))
        print(f"\n{inventory.parent.name} {name}: calibration n={len(calibration[keys[0]])}")
        for key, values_list in raw.items():
            cal = np.sort(np.asarray(calibration[key]))
            values = np.asarray(values_list)
            p_values = (1 + len(cal) - np.searchsorted(cal, values, side="left")) / (len(cal) + 1)
            flagged = p_values <= rate
            auroc = float(np.mean(values[missing][:, None] > values[~missing][None, :]))
            group = "cold" if name == "cold" else "evidence"
            totals.setdefault((group, key), []).extend(
                (float(f), bool(m)) for f, m in zip(flagged, missing, strict=True))
            print(f"  {key:60s} false-flag {flagged[~missing].mean():.3f} caught "
                  f"{flagged[missing].mean():.3f} ({flagged[missing].sum()}/{missing.sum()}) "
                  f"AUROC {auroc:.3f}")
    print(f"\n{inventory.parent.name} totals")
    for (group, key), pairs in totals.items():
        flags = np.array([f for f, _ in pairs])
        miss = np.array([m for _, m in pairs])
        print(f"  {group:9s} {key:60s} false-flag {flags[~miss].mean():.3f} caught "
              f"{flags[miss].mean():.3f}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("pairs", nargs="+", type=Path)
    parser.add_argument("--rate", type=float, default=0.05)
    args = parser.parse_args()
    for inventory, labeled in zip(args.pairs[::2], args.pairs[1::2], strict=True):
        evaluate_set(inventory, labeled, args.rate)


if __name__ == "__main__":
    main()
