"""The disambiguation engine: plain data in, sense decisions with rationales out.

No database, no HTTP: the store and the API turn rows and requests into the
values of `types` and call what is exported here. Exports load lazily (PEP 562),
so importing `service.engine.types` does not pull in torch and transformers.
"""

from __future__ import annotations

import importlib
from typing import Any

_EXPORTS: dict[str, str] = {
    "Assignment": "assignment",
    "CalibrationProposal": "calibration",
    "CalibrationReport": "calibration",
    "Candidate": "assignment",
    "ContextEncoder": "encoder",
    "DEFAULT_CONSISTENCY_WEIGHT": "consistency",
    "DEFAULT_EVIDENCE_PRIOR": "prototypes",
    "DEFAULT_MAX_DOCUMENT_CHARS": "disambiguator",
    "DEFAULT_PRIOR_SMOOTHING": "prototypes",
    "DEFAULT_TEMPERATURE": "assignment",
    "Disambiguator": "disambiguator",
    "Document": "types",
    "DocumentResult": "disambiguator",
    "DocumentTooLarge": "errors",
    "EncodedWindow": "encoder",
    "EngineError": "errors",
    "Evidence": "types",
    "HeldOutRow": "prototypes",
    "InventoryError": "errors",
    "InventorySettings": "types",
    "InventorySpec": "types",
    "MIN_CALIBRATION_LABELS": "calibration",
    "MissingSenseModel": "outliers",
    "NearestEvidence": "prototypes",
    "Occurrence": "types",
    "OccurrenceFinder": "occurrences",
    "OccurrenceResult": "disambiguator",
    "PrototypeBook": "prototypes",
    "PrototypeCache": "prototypes",
    "RECOMMENDED_ABSTAIN_THRESHOLD": "assignment",
    "Rationale": "rationale",
    "ReliabilityBin": "calibration",
    "SelectiveThreshold": "selective",
    "SenseSpec": "types",
    "SpanEncoding": "encoder",
    "SpanQuery": "disambiguator",
    "TermSpec": "types",
    "TrustFit": "trust",
    "UnknownTerm": "errors",
    "WordDrop": "rationale",
    "WordWeight": "rationale",
    "assign": "assignment",
    "calibrate_book": "calibration",
    "propose_calibration": "calibration",
    "calibration_rows": "calibration",
    "choose_threshold": "selective",
    "confidences_and_hits": "calibration",
    "conformal_p_value": "outliers",
    "default_model_path": "encoder",
    "expected_calibration_error": "calibration",
    "find_occurrences": "occurrences",
    "fit_missing_sense": "outliers",
    "fit_temperature": "calibration",
    "fit_trust": "trust",
    "leave_one_out_similarities": "calibration",
    "negative_log_likelihood": "calibration",
    "open_wordnet": "lexicon",
    "reliability_bins": "calibration",
    "share_within_documents": "consistency",
    "softmax": "assignment",
}

__all__ = sorted(_EXPORTS)


def __getattr__(name: str) -> Any:
    module = _EXPORTS.get(name)
    if module is None:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(importlib.import_module(f".{module}", __name__), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_EXPORTS))
