"""Missing-sense scores on cached vectors: conformal p-values against the term's labeled items.

For each held-out set (research/trust_cache.py): labeled items are the example
sentences (cold start) or examples + in-inventory even ids (with evidence). The
score of an item is computed leave-one-out; an odd-id occurrence is flagged
when its conformal p-value (Bates et al. 2023) is at most 0.05. Prints the
realised false-flag rate on odd in-inventory ids and the share of odd
missing-sense ids caught.
"""

from __future__ import annotations

import argparse

import numpy as np

from research.trust_sweep import load, term_items, unit  # noqa: F401


def knn_distance(x, items, k):
    sims = np.sort(items @ x)[::-1][:k]
    return 1.0 - float(sims.mean())


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("caches", nargs="+")
    args = parser.parse_args()
    for path in args.caches:
        data = load(path)
        book, rows, vectors = data["book"], data["rows"], data["vectors"]
        num = [int(r["id"].split("-")[-1]) for r in rows]
        for with_evidence in (False, True):
            labeled = {}
            gloss = {}
            for t in data["spec"].terms:
                vecs, kinds, _ = term_items(book, t.term)
                labeled[t.term] = [vecs[i] for i in range(len(kinds)) if kinds[i] == "example"]
                gloss[t.term] = [vecs[i] for i in range(len(kinds)) if kinds[i] == "gloss"]
            if with_evidence:
                for i, r in enumerate(rows):
                    if num[i] % 2 == 0 and r["sense"]:
                        labeled[r["term"]].append(vectors[i].astype(np.float64))
            for name, k, relative in (("1nn", 1, False), ("1nn/spread", 1, True),
                                      ("3nn", 3, False), ("3nn/spread", 3, True),
                                      ("gloss", 0, False), ("gloss+1nn", 1, False)):
                cal = []
                spread = {}
                for term, items in labeled.items():
                    lab = np.stack(items)
                    loo = []
                    for j in range(len(items)):
                        others = np.delete(lab, j, axis=0)
                        if name == "gloss":
                            loo.append(1 - max(np.stack(gloss[term]) @ lab[j]))
                        elif name == "gloss+1nn":
                            loo.append(1 - max(np.stack(gloss[term]) @ lab[j])
                                       + (knn_distance(lab[j], others, 1) if len(others) else 0.5))
                        elif len(others):
                            loo.append(knn_distance(lab[j], others, k))
                    spread[term] = float(np.median(loo)) if loo else 1.0
                    cal.extend(v / spread[term] if relative else v for v in loo)
                cal = np.array(cal)

                def score(i, rows=rows, vectors=vectors, name=name, gloss=gloss,
                          labeled=labeled, k=k, spread=spread, relative=relative):
                    term = rows[i]["term"]
                    x = vectors[i].astype(np.float64)
                    if name == "gloss":
                        s = 1 - max(np.stack(gloss[term]) @ x)
                    elif name == "gloss+1nn":
                        s = 1 - max(np.stack(gloss[term]) @ x) + knn_distance(
                            x, np.stack(labeled[term]), 1)
                    else:
                        s = knn_distance(x, np.stack(labeled[term]), k)
                    return s / spread[term] if relative else s

                def pvalue(s, cal=cal):
                    return (1 + np.sum(cal >= s)) / (len(cal) + 1)

                odd_in = [i for i, n in enumerate(num) if n % 2 and rows[i]["sense"]]
                odd_out = [i for i, n in enumerate(num) if n % 2 and not rows[i]["sense"]]
                fp = np.mean([pvalue(score(i)) <= 0.05 for i in odd_in])
                tp = np.mean([pvalue(score(i)) <= 0.05 for i in odd_out])
                s_in = np.array([score(i) for i in odd_in])
                s_out = np.array([score(i) for i in odd_out])
                auroc = float(np.mean(s_out[:, None] > s_in[None, :]))
                print(f"{path.split('/')[-1]} evidence={with_evidence} {name}: calibration n="
                      f"{len(cal)} false-flag {fp:.3f} caught {tp:.3f} AUROC {auroc:.3f}")


if __name__ == "__main__":
    main()
