"""Open the system's WordNet 3.0 database with NLTK, offline.

Debian's `wordnet-base` ships the database files under /usr/share/wordnet but
not `lexnames`, which NLTK's `WordNetCorpusReader` reads at start-up. Rather
than touching the system folder we build a private cached copy of the Debian
files plus a generated `lexnames` (the standard list of the 45 lexicographer
files) under $WHICHSENSE_CACHE_DIR or ~/.cache/whichsense. A copy, because
NLTK 3.10 refuses both symlinks leaving the corpus root and hard links. The
reader is also kept from reaching for NLTK's downloadable `wordnet` and Open
Multilingual WordNet packages: nothing here may download at run time. NLTK
(3.10+) only opens files under trusted roots, so the private folder is added
to `nltk.data.path`.

The same reader serves the occurrence finder (morphy lemmatisation) and the
WordNet inventory tools, so it is opened once per folder and shared.
"""

from __future__ import annotations

import hashlib
import os
import shutil
import tempfile
import threading
import warnings
from pathlib import Path

import nltk.data
from nltk.corpus.reader.wordnet import WordNetCorpusReader

DEFAULT_WORDNET_PATH = "/usr/share/wordnet"

# The WordNet 3.0 lexicographer files, in file-number order (lexnames(5WN)).
LEXICOGRAPHER_FILES: tuple[tuple[str, int], ...] = (
    ("adj.all", 3),
    ("adj.pert", 3),
    ("adv.all", 4),
    ("noun.Tops", 1),
    ("noun.act", 1),
    ("noun.animal", 1),
    ("noun.artifact", 1),
    ("noun.attribute", 1),
    ("noun.body", 1),
    ("noun.cognition", 1),
    ("noun.communication", 1),
    ("noun.event", 1),
    ("noun.feeling", 1),
    ("noun.food", 1),
    ("noun.group", 1),
    ("noun.location", 1),
    ("noun.motive", 1),
    ("noun.object", 1),
    ("noun.person", 1),
    ("noun.phenomenon", 1),
    ("noun.plant", 1),
    ("noun.possession", 1),
    ("noun.process", 1),
    ("noun.quantity", 1),
    ("noun.relation", 1),
    ("noun.shape", 1),
    ("noun.state", 1),
    ("noun.substance", 1),
    ("noun.time", 1),
    ("verb.body", 2),
    ("verb.change", 2),
    ("verb.cognition", 2),
    ("verb.communication", 2),
    ("verb.competition", 2),
    ("verb.consumption", 2),
    ("verb.contact", 2),
    ("verb.creation", 2),
    ("verb.emotion", 2),
    ("verb.motion", 2),
    ("verb.perception", 2),
    ("verb.possession", 2),
    ("verb.social", 2),
    ("verb.stative", 2),
    ("verb.weather", 2),
    ("adj.ppl", 3),
)


def lexnames_text() -> str:
    """The contents of a WordNet `lexnames` file: number, name, syntactic category."""
    return "".join(
        f"{number:02d}\t{name}\t{category}\n"
        for number, (name, category) in enumerate(LEXICOGRAPHER_FILES)
    )


class OfflineWordNetReader(WordNetCorpusReader):  # type: ignore[misc]  # nltk is untyped
    """A `WordNetCorpusReader` that never looks for NLTK data packages.

    `map_wn` would load NLTK's `wordnet` package to map synsets between
    WordNet versions when the folder's version string differs; we read exactly
    one WordNet, so there is nothing to map.
    """

    def map_wn(self, version: str = "wordnet") -> None:
        return None


_lock = threading.Lock()
_readers: dict[Path, WordNetCorpusReader] = {}


def _source_digest(source: Path, files: list[Path]) -> str:
    """Name the copy after the source folder and its files' sizes and times."""
    digest = hashlib.sha256(str(source).encode())
    for entry in files:
        stat = entry.stat()
        digest.update(f"{entry.name}:{stat.st_size}:{stat.st_mtime_ns}".encode())
    return digest.hexdigest()[:16]


def _build_copy(source: Path, files: list[Path], target: Path) -> None:
    """Copy `files` plus a generated `lexnames` into `target`, atomically by rename."""
    target.parent.mkdir(parents=True, exist_ok=True, mode=0o700)
    staging = Path(tempfile.mkdtemp(prefix=".staging-", dir=target.parent))
    try:
        for entry in files:
            shutil.copyfile(entry, staging / entry.name)
        (staging / "lexnames").write_text(lexnames_text(), encoding="utf-8")
        try:
            staging.rename(target)
        except OSError:
            if not (target / "lexnames").is_file():  # not a lost race with another process
                raise
    finally:
        shutil.rmtree(staging, ignore_errors=True)


def _folder_with_lexnames(source: Path, cache_dir: Path | None) -> Path:
    """Return `source` itself if complete, else a private cached copy with `lexnames` added.

    Copies, not links: NLTK 3.10 refuses symlinks that leave the corpus root
    and multiply-linked files alike.
    """
    if (source / "lexnames").is_file():
        return source
    files = sorted(entry for entry in source.iterdir() if entry.is_file())
    roots = [cache_dir] if cache_dir is not None else []
    for root in (*roots, Path(tempfile.gettempdir()) / f"whichsense-{os.getuid()}"):
        target = root / f"wordnet-{_source_digest(source, files)}"
        if (target / "lexnames").is_file():
            return target
        try:
            _build_copy(source, files, target)
            return target
        except OSError:
            continue
    raise OSError(f"cannot create a WordNet copy with lexnames for {source}")


def open_wordnet(
    path: str | os.PathLike[str] = DEFAULT_WORDNET_PATH, *, cache_dir: Path | None = None
) -> WordNetCorpusReader:
    """Open (once per folder) the WordNet database at `path` for offline reading.

    A folder without `lexnames` is copied, with one, under `cache_dir` (else a
    private folder in the temporary directory).

    Raises FileNotFoundError if the folder lacks WordNet's index files.
    """
    source = Path(path).resolve()
    with _lock:
        reader = _readers.get(source)
        if reader is not None:
            return reader
        if not (source / "index.noun").is_file():
            raise FileNotFoundError(f"no WordNet database (index.noun) under {source}")
        folder = _folder_with_lexnames(source, cache_dir)
        if str(folder) not in nltk.data.path:
            nltk.data.path.append(str(folder))
        with warnings.catch_warnings():
            # "The multilingual functions are not available": expected, we pass no OMW reader.
            warnings.simplefilter("ignore", UserWarning)
            reader = OfflineWordNetReader(str(folder), None)
        _readers[source] = reader
        return reader
