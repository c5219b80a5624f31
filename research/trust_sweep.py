"""Sweep evidence rules and missing-sense scores on cached vectors (research/trust_cache.py).

Protocol per held-out set: odd ids are scored; a share of all labeled occurrences
(10, 25, 50 %) drawn from the even ids is given as evidence (50 % = every even
in-inventory id), averaged over seeds. Nothing is re-encoded.
"""

from __future__ import annotations

import argparse
import pickle
import threading
from collections import defaultdict

import numpy as np


def unit(v: np.ndarray) -> np.ndarray:
    n = np.linalg.norm(v, axis=-1, keepdims=True)
    return v / np.where(n > 0, n, 1)


def load(path: str):
    with open(path, "rb") as handle:
        data = pickle.load(handle)
    data["book"]._lock = threading.Lock()
    return data


def term_items(book, term):
    items = book._items[term]
    return (np.stack(items.vectors).astype(np.float64), list(items.kinds), list(items.sense_ids))


def scores(method, term, senses, x, defs, ev, k_prior, params):
    """defs: sense -> (gloss vec, [example vecs]); ev: sense -> [evidence vecs]."""
    rows = []
    for s in senses:
        g, exs = defs[s]
        d = unit(np.mean([g, *exs], axis=0)) if exs else g
        e = ev.get(s, [])
        n = len(e)
        if n:
            w = n / (n + k_prior)
            p = unit((1 - w) * d + w * unit(np.mean(e, axis=0)))
        else:
            p = d
        rows.append(p)
    protos = np.stack(rows)
    base = protos @ x
    if method == "blend":
        return base
    if method == "knn":
        # prototype score plus a distance-weighted vote of the k nearest labeled items
        lam, k, temp = params
        labeled, owner = [], []
        for i, s in enumerate(senses):
            for v in [*defs[s][1], *ev.get(s, [])]:
                labeled.append(v)
                owner.append(i)
        if not labeled:
            return base
        sims = np.stack(labeled) @ x
        top = np.argsort(-sims)[:k]
        vote = np.zeros(len(senses))
        for j in top:
            vote[owner[j]] += np.exp(sims[j] / temp)
        vote = vote / vote.sum()
        return base + lam * vote
    if method == "csls":
        # CSLS: penalise prototypes that sit close to every occurrence of the term (hubs)
        k = params[0]
        labeled = [v for s in senses for v in [*defs[s][1], *ev.get(s, [])]]
        if len(labeled) < 2:
            return base
        lab = np.stack(labeled)
        r = np.sort(protos @ lab.T, axis=1)[:, ::-1][:, : min(k, len(labeled))].mean(axis=1)
        return base - params[1] * r
    if method == "twochannel":
        # definition channel (gloss + examples prototype, CSLS) + contextual kNN channel over
        # examples and evidence, each item's similarity corrected by its own hubness (CSLS)
        k, a, w, m, ramp = params
        labeled, owner = [], []
        for i, s in enumerate(senses):
            for v in [*defs[s][1], *ev.get(s, [])]:
                labeled.append(v)
                owner.append(i)
        dmat = np.stack([unit(np.mean([defs[s][0], *defs[s][1]], axis=0)) for s in senses])
        if len(labeled) < 2:
            return dmat @ x
        lab = np.stack(labeled)
        kk = min(k, len(labeled))
        r_def = np.sort(dmat @ lab.T, axis=1)[:, ::-1][:, :kk].mean(axis=1)
        def_score = dmat @ x - a * r_def
        gram = lab @ lab.T
        np.fill_diagonal(gram, -np.inf)
        r_item = np.sort(gram, axis=1)[:, ::-1][:, : max(1, min(k, len(labeled) - 1))].mean(axis=1)
        corrected = lab @ x - a * r_item
        owner_a = np.array(owner)
        ctx = np.full(len(senses), np.nan)
        for i in range(len(senses)):
            mine = np.sort(corrected[owner_a == i])[::-1]
            if len(mine):
                ctx[i] = mine[: m].mean()
        n_ev = sum(len(ev.get(s, [])) for s in senses)
        weight = w if not ramp else w * n_ev / (n_ev + ramp)
        ctx = np.where(np.isnan(ctx), def_score, ctx)
        return (1 - weight) * def_score + weight * ctx
    if method == "csls_other":
        # CSLS whose neighbourhood of a sense's prototype is the labeled items of the
        # term's other senses: a prototype close to everything else is penalised
        k, a = params
        out = base.copy()
        for i, s in enumerate(senses):
            others = [v for t in senses if t != s for v in [*defs[t][1], *ev.get(t, [])]]
            if others:
                sims = np.sort(np.stack(others) @ protos[i])[::-1][: k]
                out[i] -= a * sims.mean()
        return out
    if method == "center":
        # per-term centering of contextual vectors (examples, evidence, occurrence)
        labeled = [v for s in senses for v in [*defs[s][1], *ev.get(s, [])]]
        mu = np.mean(labeled, axis=0) if labeled else 0
        out = []
        for s in senses:
            g, exs = defs[s]
            ctx = [*exs, *ev.get(s, [])]
            c = unit(np.mean(ctx, axis=0) - mu) @ unit(x - mu) if ctx else 0.0
            out.append(c)
        return base + params[0] * np.array(out)
    raise ValueError(method)


def run(data, method, k_prior, params, share, seeds=5):
    book, rows, vectors = data["book"], data["rows"], data["vectors"]
    spec = data["spec"]
    defs_by_term = {}
    for t in spec.terms:
        vecs, kinds, sids = term_items(book, t.term)
        defs = {}
        for s in t.senses:
            mine = [i for i in range(len(kinds)) if sids[i] == s.sense_id]
            g = [vecs[i] for i in mine if kinds[i] == "gloss"]
            ex = [vecs[i] for i in mine if kinds[i] == "example"]
            defs[s.sense_id] = (g[0], ex)
        defs_by_term[t.term] = (tuple(s.sense_id for s in t.senses), defs)
    num = [int(r["id"].split("-")[-1]) for r in rows]
    even = [i for i, n in enumerate(num) if n % 2 == 0 and rows[i]["sense"]]
    odd = [i for i, n in enumerate(num) if n % 2 == 1 and rows[i]["sense"]]
    total = sum(1 for r in rows if r["sense"])
    want = round(share * total)
    accs = []
    for seed in range(seeds if 0 < want < len(even) else 1):
        rng = np.random.default_rng(seed)
        chosen = rng.permutation(even)[:want] if want else []
        ev = defaultdict(lambda: defaultdict(list))
        for i in chosen:
            ev[rows[i]["term"]][rows[i]["sense"]].append(vectors[i].astype(np.float64))
        hits = []
        for i in odd:
            term = rows[i]["term"]
            senses, defs = defs_by_term[term]
            sc = scores(method, term, senses, vectors[i].astype(np.float64), defs, ev[term],
                        k_prior, params)
            hits.append(senses[int(np.argmax(sc))] == rows[i]["sense"])
        accs.append(np.mean(hits))
    return float(np.mean(accs))


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("caches", nargs="+")
    args = parser.parse_args()
    sets = {path: load(path) for path in args.caches}
    configs = [("blend", 4, ()), ("csls", 4, (3, 0.5)), ("csls", 16, (3, 0.5))]
    configs += [("csls", kp, (3, a)) for kp in (4, 16, 64, 1e9) for a in (0.75,)]
    print("method k_prior params | " + " | ".join(f"{p.split('/')[-1]} 0/10/25/50%" for p in sets))
    for method, k_prior, params in configs:
        cells = []
        for data in sets.values():
            cells.append(" ".join(f"{run(data, method, k_prior, params, s):.3f}"
                                  for s in (0.0, 0.1, 0.25, 0.5)))
        print(f"{method} {k_prior} {params} | " + " | ".join(cells), flush=True)


if __name__ == "__main__":
    main()
