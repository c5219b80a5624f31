"""The in-process runs: encoder ceiling, shipped engine, and the naive loop.

Ceiling and engine are timed slice by slice, alternately, so that both see the
same load on a shared host; their ratio is the figure that matters.
"""

from __future__ import annotations

import time
from collections.abc import Callable, Sequence

import numpy as np
import torch

from service.bench.figures import Measured
from service.engine.disambiguator import Disambiguator
from service.engine.encoder import MODEL_MAX_TOKENS, ContextEncoder
from service.engine.types import Document

Progress = Callable[[int], None]
SLICES = 4


Timed = Measured


class Clock:
    """Wall and process CPU time together; CPU time hardly moves with the host's load."""

    def __init__(self) -> None:
        self.wall = time.perf_counter()
        self.cpu = time.process_time()

    def elapsed(self) -> tuple[float, float]:
        return time.perf_counter() - self.wall, time.process_time() - self.cpu


def engine_windows(engine: Disambiguator, documents: Sequence[Document]) -> tuple[list[str], int]:
    """The window texts the engine encodes for `documents` (planned group by group, as
    `Disambiguator.tag` does) and the number of occurrences they serve."""
    texts: list[str] = []
    occurrences = 0
    for lo in range(0, len(documents), engine.group_size):
        spans: list[tuple[str, int, int]] = []
        for document in documents[lo : lo + engine.group_size]:
            fields = dict(document.fields)
            spans.extend(
                (fields[found.field], found.start, found.end)
                for found in engine.finder.find(document)
            )
        occurrences += len(spans)
        if spans:
            windows, _placed = engine.encoder.plan(spans)
            texts.extend(text for text, _ in windows)
    return texts, occurrences


def ceiling_seconds(encoder: ContextEncoder, texts: Sequence[str]) -> tuple[float, float]:
    """Wall and CPU seconds of the bare forward pass (hidden states and attention weights, as the
    rationale needs) over `texts`, batched by token length; tokenising is not timed."""
    ids = encoder.tokenizer(list(texts), add_special_tokens=True, truncation=True,
                            max_length=MODEL_MAX_TOKENS)["input_ids"]
    order = sorted(range(len(ids)), key=lambda i: len(ids[i]))
    batches = []
    for lo in range(0, len(order), encoder.batch_size):
        chosen = [ids[i] for i in order[lo : lo + encoder.batch_size]]
        width = max(len(row) for row in chosen)
        tokens = torch.zeros((len(chosen), width), dtype=torch.long)
        mask = torch.zeros((len(chosen), width), dtype=torch.long)
        for row, values in enumerate(chosen):
            tokens[row, : len(values)] = torch.as_tensor(values)
            mask[row, : len(values)] = 1
        batches.append((tokens, mask))
    clock = Clock()
    with torch.inference_mode():
        for tokens, mask in batches:
            encoder.model(
                input_ids=tokens,
                attention_mask=mask,
                token_type_ids=torch.zeros_like(tokens),
                output_hidden_states=True,
                output_attentions=True,
            )
    return clock.elapsed()


def ceiling_and_engine(
    engine: Disambiguator, documents: Sequence[Document], progress: Progress
) -> tuple[Timed, Timed]:
    """Both runs over the same documents, alternating slice by slice."""
    ceiling = [0.0, 0.0]
    engine_total = [0.0, 0.0]
    occurrences = 0
    size = max(1, -(-len(documents) // SLICES))
    for lo in range(0, len(documents), size):
        part = documents[lo : lo + size]
        texts, found = engine_windows(engine, part)
        wall, cpu = ceiling_seconds(engine.encoder, texts)
        ceiling[0] += wall
        ceiling[1] += cpu
        progress(found)
        clock = Clock()
        tagged = sum(len(result.occurrences) for result in engine.tag(part, rationale=True))
        wall, cpu = clock.elapsed()
        engine_total[0] += wall
        engine_total[1] += cpu
        if tagged != found:
            raise RuntimeError(f"the engine tagged {tagged} occurrences, the plan held {found}")
        occurrences += found
        progress(found)
    return Timed(occurrences, *ceiling), Timed(occurrences, *engine_total)


def naive(engine: Disambiguator, documents: Sequence[Document], progress: Progress) -> Timed:
    """One encoder call per occurrence over its whole field (truncated at the model's
    limit), no batching and no reuse; nearest prototype by cosine."""
    encoder = engine.encoder
    occurrences = 0
    clock = Clock()
    for document in documents:
        fields = dict(document.fields)
        for found in engine.finder.find(document):
            encoding = encoder.tokenizer(
                fields[found.field], truncation=True, max_length=MODEL_MAX_TOKENS,
                return_offsets_mapping=True, return_tensors="pt",
            )
            offsets = encoding.pop("offset_mapping")[0].numpy()
            with torch.inference_mode():
                output = encoder.model(**encoding, output_hidden_states=True)
            hits = np.flatnonzero((offsets[:, 0] < found.end) & (offsets[:, 1] > found.start))
            if len(hits) == 0:  # the span lies past the model's limit: read what is left
                hits = np.arange(1, offsets.shape[0] - 1)
            vector = output.hidden_states[-1][0, hits].mean(dim=0).numpy()
            vector /= max(float(np.linalg.norm(vector)), 1e-12)
            int(np.argmax(engine.prototypes.similarities(found.term, vector)))
            occurrences += 1
            progress(1)
    return Timed(occurrences, *clock.elapsed())
