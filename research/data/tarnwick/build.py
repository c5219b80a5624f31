"""Turn labeled.txt (sense TAB text with [[occurrence]]) into labeled.jsonl; invented data.

    .venv/bin/python -m research.data.tarnwick.build
"""

from pathlib import Path

from research.files import build_labeled

if __name__ == "__main__":
    print(*build_labeled(Path(__file__).parent, "tw"))
