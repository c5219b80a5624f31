"""Context windows: sentences, trimming to the token budget, widening, grouping."""

from __future__ import annotations

from service.engine.windows import TextTokens, plan_windows, sentence_spans


def whitespace_tokens(text: str) -> TextTokens:
    """One token per whitespace-separated word (a stand-in tokenizer with real offsets)."""
    starts, ends, position = [], [], 0
    for word in text.split(" "):
        if word:
            starts.append(position)
            ends.append(position + len(word))
        position += len(word) + 1
    return TextTokens(starts, ends, [True] * len(starts))


def test_sentence_spans_split_on_terminal_punctuation_and_blank_lines():
    text = 'He left. "Why?" she asked! Then\nmore words\n\nA new paragraph'
    pieces = [text[s:e] for s, e in sentence_spans(text)]
    assert pieces == ['He left.', '"Why?" she asked!', "Then\nmore words", "A new paragraph"]


def test_sentence_spans_keep_decimals_and_lowercase_continuations():
    text = "It costs 3.5 dollars. e.g. this stays"
    assert [text[s:e] for s, e in sentence_spans(text)] == [text]


def test_one_window_per_sentence_serving_all_its_spans():
    text = "a bass and a bass here. Another bass there."
    tokens = whitespace_tokens(text)
    spans = [(2, 6), (13, 17), (32, 36)]
    windows = plan_windows(text, tokens, spans, max_tokens=50)
    assert [(text[w.start : w.end], w.span_ids) for w in windows] == [
        ("a bass and a bass here.", (0, 1)),
        ("Another bass there.", (2,)),
    ]


def test_long_sentence_is_trimmed_around_the_span():
    words = [f"w{i}" for i in range(100)]
    words[70] = "bass"
    text = " ".join(words)
    tokens = whitespace_tokens(text)
    start = text.index("bass")
    (window,) = plan_windows(text, tokens, [(start, start + 4)], max_tokens=20)
    inside = text[window.start : window.end].split(" ")
    assert len(inside) <= 20
    assert "bass" in inside
    centre = inside.index("bass")
    assert 8 <= centre <= 12


def test_distant_spans_in_a_long_sentence_get_separate_windows():
    words = [f"w{i}" for i in range(200)]
    words[10] = words[190] = "bass"
    text = " ".join(words)
    tokens = whitespace_tokens(text)
    first = text.index("bass")
    second = text.rindex("bass")
    windows = plan_windows(text, tokens, [(first, first + 4), (second, second + 4)], 30)
    assert [w.span_ids for w in windows] == [(0,), (1,)]
    for window, (s, e) in zip(windows, [(first, first + 4), (second, second + 4)], strict=True):
        assert window.start <= s and e <= window.end


def test_short_sentence_is_widened_to_min_tokens():
    text = "One two three four. Bass. Five six seven eight."
    tokens = whitespace_tokens(text)
    start = text.index("Bass")
    (window,) = plan_windows(text, tokens, [(start, start + 4)], max_tokens=50, min_tokens=5)
    assert len(text[window.start : window.end].split(" ")) >= 5
    assert window.start <= start < window.end


def test_window_edges_snap_to_word_starts():
    # Tokens 1-2 and 4-5 are continuation pieces: a window may not start inside a word.
    text = "abcdef ghijkl mnopqr"
    tokens = TextTokens(
        starts=[0, 3, 7, 10, 14, 17],
        ends=[3, 6, 10, 13, 17, 20],
        word_start=[True, False, True, False, True, False],
    )
    (window,) = plan_windows(text, tokens, [(7, 13)], max_tokens=3)
    assert text[window.start : window.end] in ("abcdef ghijkl", "ghijkl mnopqr")
