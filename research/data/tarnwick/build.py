"""Turn labeled.txt (sense TAB text with [[occurrence]]) into labeled.jsonl; invented data."""

import json
from pathlib import Path

here = Path(__file__).parent
out = []
for line in (here / "labeled.txt").read_text(encoding="utf-8").splitlines():
    if not line.strip() or line.startswith("#"):
        continue
    sense, marked = line.split("\t")
    start = marked.index("[[")
    end = marked.index("]]") - 2
    text = marked.replace("[[", "").replace("]]", "")
    term = sense.split(".")[0].split(":")[0]
    out.append({"id": f"tw-{len(out) + 1:04d}", "text": text, "start": start, "end": end,
                "term": term, "sense": None if sense.endswith(":-") else sense})
(here / "labeled.jsonl").write_text(
    "".join(json.dumps(row, ensure_ascii=False) + "\n" for row in out), encoding="utf-8")
print(len(out), sum(row["sense"] is None for row in out))
