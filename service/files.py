"""Files written whole or not at all (temporary file, flush, fsync, rename), and the per-orbit
result folder of ``trailcast screen`` (``DIR/results/<key>.json``), so that a run interrupted
and started again skips the orbits already done."""

import json
import os
import tempfile
from pathlib import Path


class ResultDir:
    """Per-orbit results as ``DIR/results/<key>.json``, each written atomically."""

    def __init__(self, out_dir: Path):
        self.dir = Path(out_dir) / "results"
        self.dir.mkdir(parents=True, exist_ok=True)

    def path(self, key: str) -> Path:
        return self.dir / f"{key}.json"

    def lookup(self, key: str) -> dict | None:
        try:
            return json.loads(self.path(key).read_text(encoding="utf-8"))
        except (OSError, ValueError):  # absent, or unreadable: compute it again
            return None

    def save(self, key: str, record: dict) -> None:
        write_atomic(self.path(key), json.dumps(record, allow_nan=False))


def write_atomic(path: Path, text: str) -> None:
    """Write ``text`` to ``path`` through a temporary file in the same folder and a rename."""
    path = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as f:
            f.write(text)
            f.flush()
            os.fsync(f.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise
