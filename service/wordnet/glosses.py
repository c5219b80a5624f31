"""The text a WordNet sense's gloss vector is encoded from.

The sentence encoder reads a gloss as a short text pooled over all of its
tokens, so the lemma leads ("bass: the lowest part of the musical range")
and, by default, the synset's examples follow, which put the lemma in
context. The variants were compared on held-out SemCor documents
(docs/measurements.md).
"""

from __future__ import annotations

from collections.abc import Callable

from nltk.corpus.reader.wordnet import Lemma

from service.wordnet.senses import surface_form


def _definition(sense: Lemma) -> str:
    return f"{surface_form(sense.name())}: {sense.synset().definition()}"


def _definition_examples(sense: Lemma) -> str:
    return "; ".join([_definition(sense), *sense.synset().examples()])


def _synonyms_definition_examples(sense: Lemma) -> str:
    own = surface_form(sense.name())
    others = [
        surface_form(other.name())
        for other in sense.synset().lemmas()
        if other.name() != sense.name()
    ]
    head = ", ".join([own, *others])
    return "; ".join([f"{head}: {sense.synset().definition()}", *sense.synset().examples()])


GLOSS_TEMPLATES: dict[str, Callable[[Lemma], str]] = {
    "definition": _definition,
    "definition+examples": _definition_examples,
    "synonyms+definition+examples": _synonyms_definition_examples,
}
DEFAULT_GLOSS_TEMPLATE = "definition+examples"


def gloss_text(sense: Lemma, template: str = DEFAULT_GLOSS_TEMPLATE) -> str:
    """The gloss text of `sense` under a named template."""
    try:
        return GLOSS_TEMPLATES[template](sense)
    except KeyError:
        raise ValueError(f"unknown gloss template {template!r}") from None
