"""The context encoder checked against a plain transformers forward pass and by-hand attention."""

from __future__ import annotations

import math

import numpy as np
import pytest
import torch
from transformers import AutoModel, AutoTokenizer

from service.engine.encoder import _directory_digest, attention_rollout
from service.engine.rationale import attention_words, word_weights

SENTENCE = "We caught a huge bass in the lake yesterday, then grilled it."


@pytest.fixture(scope="module")
def reference(encoder):
    """The same model directory loaded the default way (scaled-dot-product attention)."""
    tokenizer = AutoTokenizer.from_pretrained(encoder.model_path, local_files_only=True)
    model = AutoModel.from_pretrained(encoder.model_path, local_files_only=True).eval()
    return tokenizer, model


def reference_span_vector(reference, layers, text: str, start: int, end: int) -> np.ndarray:
    tokenizer, model = reference
    encoding = tokenizer(text, return_offsets_mapping=True, return_tensors="pt")
    with torch.no_grad():
        states = model(
            input_ids=encoding["input_ids"],
            attention_mask=encoding["attention_mask"],
            output_hidden_states=True,
        ).hidden_states
    offsets = encoding["offset_mapping"][0].tolist()
    picked = [i for i, (s, e) in enumerate(offsets) if e > s and s < end and e > start]
    stacked = torch.stack([states[layer][0, picked] for layer in layers])
    vector = stacked.mean(dim=0).mean(dim=0).numpy()
    return vector / np.linalg.norm(vector)


def test_span_vector_equals_plain_transformers_forward(encoder, reference):
    # Reference library: Hugging Face transformers AutoModel, hidden states of the same window.
    start = SENTENCE.index("bass")
    ours = encoder.encode_spans([(SENTENCE, start, start + 4)])[0]
    theirs = reference_span_vector(reference, encoder.layers, SENTENCE, start, start + 4)
    np.testing.assert_allclose(ours, theirs, atol=2e-5)


def test_span_in_a_multi_sentence_text_is_read_in_its_sentence(encoder, reference):
    text = "The river was calm. " + SENTENCE + " Nobody else came."
    start = text.index("bass")
    ours = encoder.encode_spans([(text, start, start + 4)])[0]
    local = SENTENCE.index("bass")
    theirs = reference_span_vector(reference, encoder.layers, SENTENCE, local, local + 4)
    np.testing.assert_allclose(ours, theirs, atol=2e-5)


def test_multi_subword_term_is_mean_pooled(encoder, reference):
    text = "The old zorbixes hummed before the show."
    start = text.index("zorbixes")
    end = start + len("zorbixes")
    assert len(encoder.tokenizer.tokenize("zorbixes")) > 1
    ours = encoder.encode_spans([(text, start, end)])[0]
    theirs = reference_span_vector(reference, encoder.layers, text, start, end)
    np.testing.assert_allclose(ours, theirs, atol=2e-5)


def test_vectors_are_unit_float32_and_batching_does_not_change_them(encoder):
    texts = [
        "A bass.",
        SENTENCE,
        "The bass player tuned his instrument while the drummer waited for the sound check.",
    ]
    spans = [(t, t.index("bass"), t.index("bass") + 4) for t in texts]
    together = encoder.encode_spans(spans)
    assert together.dtype == np.float32
    np.testing.assert_allclose(np.linalg.norm(together, axis=1), 1.0, atol=1e-5)
    one_by_one = np.stack([encoder.encode_spans([span])[0] for span in spans])
    np.testing.assert_allclose(together, one_by_one, atol=2e-5)


def test_identical_windows_are_encoded_once(encoder):
    first = "They caught a bass and a trout."
    second = "".join(list(first))  # equal text, a different object
    spans = [(first, 14, 18), (second, 14, 18), (first, 25, 30)]
    encoder.tokens_encoded = 0
    vectors = encoder.encode_spans(spans)
    single = len(encoder.tokenizer(first)["input_ids"])
    assert encoder.tokens_encoded == single
    np.testing.assert_allclose(vectors[0], vectors[1])


def test_long_text_window_is_trimmed_to_the_budget(encoder, reference):
    filler = " ".join(f"word{i}" for i in range(300))
    text = f"{filler} the bass swam {filler}"
    start = text.index("bass")
    (encoding,) = encoder.encode_spans_detailed([(text, start, start + 4)])
    real_tokens = int((~encoding.window.special).sum())
    assert real_tokens <= encoder.max_window_tokens + 4
    window_text = encoding.window.text
    local = start - encoding.window.text_start
    assert window_text[local : local + 4] == "bass"
    theirs = reference_span_vector(reference, encoder.layers, window_text, local, local + 4)
    np.testing.assert_allclose(encoding.vector, theirs, atol=2e-5)


def test_term_tokens_map_back_to_the_span_with_unicode_around(encoder):
    text = "😀 Café\r\nthe BASS 👍🏽 line e\u0301 rocks."
    start = text.index("BASS")
    (encoding,) = encoder.encode_spans_detailed([(text, start, start + 4)])
    offsets = encoding.window.offsets[encoding.term_tokens]
    assert int(offsets[:, 0].min()) == start
    assert int(offsets[:, 1].max()) == start + 4


def test_attention_equals_scaled_dot_product_recomputed_by_hand(encoder, reference):
    # Vaswani et al. 2017: attention = softmax(Q K^T / sqrt(d_k)), Q = X W_Q + b_Q, K = X W_K + b_K,
    # recomputed from the model's own query/key weights for the last layer.
    tokenizer, model = reference
    start = SENTENCE.index("bass")
    (encoding,) = encoder.encode_spans_detailed([(SENTENCE, start, start + 4)])
    inputs = tokenizer(SENTENCE, return_tensors="pt")
    with torch.no_grad():
        states = model(**inputs, output_hidden_states=True).hidden_states
    layer = model.config.num_hidden_layers - 1
    heads = model.config.num_attention_heads
    d_k = model.config.hidden_size // heads
    block = model.encoder.layer[layer].attention.self
    x = states[layer][0].double()
    q = x @ block.query.weight.double().T + block.query.bias.double()
    k = x @ block.key.weight.double().T + block.key.bias.double()
    per_head = []
    for head in range(heads):
        cols = slice(head * d_k, (head + 1) * d_k)
        scores = q[:, cols] @ k[:, cols].T / math.sqrt(d_k)
        per_head.append(torch.softmax(scores, dim=-1))
    by_hand = torch.stack(per_head).detach().numpy()

    # One head against the model's own eager attention output...
    with torch.no_grad():
        eager = encoder.model(**inputs, output_attentions=True).attentions[layer][0]
    np.testing.assert_allclose(by_hand[3], eager[3].numpy(), atol=1e-5)
    # ...the head average the encoder keeps...
    head_average = by_hand.mean(axis=0)
    np.testing.assert_allclose(encoding.window.attention, head_average, atol=1e-5)
    # ...and the words the rationale reports, rebuilt from the by-hand matrix.
    reported = attention_words(encoding, top_k=50)
    rebuilt = word_weights(head_average, encoding)
    assert [w.word for w in reported] == [w.word for w in rebuilt]
    np.testing.assert_allclose(
        [w.weight for w in reported], [w.weight for w in rebuilt], atol=1e-5
    )


def test_attention_rollout_follows_abnar_and_zuidema():
    # Abnar & Zuidema 2020: A_hat = 0.5 A + 0.5 I, rows renormalised, rollout = A_hat_L ... A_hat_1.
    rng = np.random.default_rng(0)
    layers = [rng.dirichlet(np.ones(5), size=5) for _ in range(3)]
    expected = np.eye(5)
    for attention in layers:
        mixed = 0.5 * attention + 0.5 * np.eye(5)
        mixed = mixed / mixed.sum(axis=1, keepdims=True)
        expected = mixed @ expected
    np.testing.assert_allclose(attention_rollout(layers), expected, atol=1e-12)
    np.testing.assert_allclose(attention_rollout(layers).sum(axis=1), 1.0, atol=1e-12)


def test_gloss_vector_is_the_mean_of_all_template_tokens(encoder, reference):
    tokenizer, model = reference
    text = encoder.gloss_text("bass", "a fish caught for sport", ())
    ours = encoder.encode_glosses([("bass", "a fish caught for sport", ())])[0]
    inputs = tokenizer(text, return_tensors="pt")
    with torch.no_grad():
        states = model(**inputs, output_hidden_states=True).hidden_states
    tokens = slice(1, inputs["input_ids"].shape[1] - 1)  # drop [CLS] and [SEP]
    vector = torch.stack([states[layer][0, tokens] for layer in encoder.layers]).mean(0).mean(0)
    vector = vector.numpy() / np.linalg.norm(vector.numpy())
    np.testing.assert_allclose(ours, vector, atol=2e-5)


def test_empty_input_gives_empty_arrays(encoder):
    assert encoder.encode_spans([]).shape == (0, encoder.dimension)
    assert encoder.encode_spans_detailed([]) == []


def test_model_id_names_the_directory_contents(encoder, tmp_path):
    assert encoder.model_id.split(":")[1] == _directory_digest(encoder.model_path)
    (tmp_path / "config.json").write_text("{}")
    before = _directory_digest(tmp_path)
    (tmp_path / "config.json").write_text('{"changed": true}')
    assert _directory_digest(tmp_path) != before


def test_default_threads_leave_loaded_cores_alone():
    from service.engine.encoder import default_thread_count

    assert default_thread_count(cores=2, load=0.2) == 2  # quiet host: every core
    assert default_thread_count(cores=2, load=1.6) == 1  # one core busy elsewhere
    assert default_thread_count(cores=2, load=12.0) == 1  # never fewer than one
    assert default_thread_count(cores=8, load=3.0) == 5


def test_padded_batches_match_one_text_at_a_time(encoder):
    # Dynamic padding and length bucketing must not change a vector: the same spans encoded
    # in one mixed-length call and one by one agree (padding is masked out of attention).
    spans = [
        (SENTENCE, 19, 23),
        ("A bass.", 2, 6),
        ("The bass line of that song carries the whole chorus for a minute or two.", 4, 8),
    ]
    together = encoder.encode_spans(spans)
    alone = np.vstack([encoder.encode_spans([span]) for span in spans])
    assert np.allclose(together, alone, atol=1e-4)


@pytest.mark.slow
def test_int8_encoder_is_a_different_model_close_to_the_float_one(encoder):
    from service.engine.encoder import ContextEncoder

    quantized = ContextEncoder(encoder.model_path, num_threads=1, quantize=True)
    assert quantized.model_id == encoder.model_id + ":int8"  # prototypes never mix
    span = [(SENTENCE, 19, 23)]
    cosine = float(encoder.encode_spans(span)[0] @ quantized.encode_spans(span)[0])
    assert 0.9 < cosine < 1.0  # int8 weights move the vector a little, not away


def reference_sentence_vector(reference, text: str) -> np.ndarray:
    """Sentence-BERT's mean pooling (Reimers & Gurevych 2019; the sentence-transformers
    configuration of all-MiniLM-L6-v2): last layer, averaged over every token under the
    attention mask, [CLS] and [SEP] included, then L2-normalised."""
    tokenizer, model = reference
    encoding = tokenizer(text, return_tensors="pt")
    with torch.no_grad():
        last = model(**encoding).last_hidden_state[0]
    vector = last.mean(dim=0).numpy()
    return vector / np.linalg.norm(vector)


def test_window_sentence_vectors_are_the_native_sentence_embedding(encoder, reference):
    other = "The bass line carried the whole song."
    spans = [(SENTENCE, SENTENCE.index("bass"), SENTENCE.index("bass") + 4),
             (SENTENCE, SENTENCE.index("lake"), SENTENCE.index("lake") + 4),
             (other, 4, 8)]
    vectors, sentences = encoder.encode_spans_with_windows(spans)
    assert np.array_equal(vectors, encoder.encode_spans(spans))  # the same forward pass
    for (text, _, _), sentence in zip(spans, sentences, strict=True):
        np.testing.assert_allclose(sentence, reference_sentence_vector(reference, text),
                                   atol=1e-5)
    np.testing.assert_allclose(encoder.encode_sentences([other])[0], sentences[2], atol=1e-5)
    (detailed,) = encoder.encode_spans_detailed(spans[:1])
    np.testing.assert_allclose(detailed.sentence, sentences[0], atol=1e-5)
    empty_vectors, empty_sentences = encoder.encode_spans_with_windows([])
    assert empty_vectors.shape == empty_sentences.shape == (0, encoder.dimension)


def test_gloss_sentences_use_the_gloss_template(encoder, reference):
    (vector,) = encoder.encode_gloss_sentences([("bass", "a freshwater fish", ())])
    expected = reference_sentence_vector(reference, encoder.gloss_text("bass", "a freshwater fish"))
    np.testing.assert_allclose(vector, expected, atol=1e-5)
