"""The README's configuration table and command list stay true to the code."""

from __future__ import annotations

import re
import time
from pathlib import Path

import pytest

from service.cli.main import build_parser
from service.config import Settings

REPO = Path(__file__).resolve().parent.parent
README = (REPO / "README.md").read_text(encoding="utf-8")


def test_every_setting_is_in_the_configuration_table_with_its_default():
    rows = dict(re.findall(r"^\| `(WHICHSENSE_[A-Z_]+)` \| ([^|]+) \|", README, re.MULTILINE))
    fields = {f"WHICHSENSE_{name.upper()}": field for name, field in Settings.model_fields.items()}
    assert set(rows) == set(fields)
    for variable, field in fields.items():
        shown = rows[variable].strip().strip("`")
        if isinstance(field.default, bool):
            assert shown == str(field.default).lower(), variable
        elif isinstance(field.default, (int, float)):
            assert float(shown) == float(field.default), variable


def test_every_subcommand_is_in_the_command_table():
    parser = build_parser()
    commands = next(a for a in parser._actions if a.dest == "command").choices
    for name in commands:
        assert f"`whichsense {name}" in README, name


def test_demo_evidence_and_held_out_counts_are_what_the_demo_splits():
    from service.cli.demo import split_labels

    evidence, held_out = split_labels(REPO / "demo_corpus" / "labeled.jsonl")
    total = len(evidence) + len(held_out)
    text = " ".join(README.split())
    assert f"{len(evidence)} of the {total} labeled" in text
    assert f"({len(evidence)} of the {total}; the other {len(held_out)} are held out" in text
    assert f"On the other {len(held_out)} (" in text


def test_the_webhook_verification_snippet_verifies_a_real_signature():
    """The README's Python block, run against what the service sends (RFC 9421 + RFC 9530)."""
    from http_message_signatures import InvalidSignature

    from service.batches.webhooks.signatures import signature_headers

    block = re.search(r"```python\n(.*?def verify_webhook.*?)```", README, re.DOTALL)
    assert block is not None
    scope: dict = {}
    exec(block.group(1), scope)
    url, body = "https://hooks.example.com/ws?x=1", b'{"batch_id":"b1","state":"done"}'
    headers = signature_headers(
        secret="s3", key_id="k1", url=url, body=body, created=int(time.time())
    )
    (result,) = scope["verify_webhook"](url, headers, body, "k1", "s3")
    assert result.parameters["keyid"] == "k1"
    with pytest.raises(InvalidSignature):
        scope["verify_webhook"](url, headers, body + b" ", "k1", "s3")
    with pytest.raises(InvalidSignature):
        scope["verify_webhook"](url, headers, body, "k1", "not-the-secret")
