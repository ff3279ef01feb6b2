"""Child processes as Linux /proc shows them: for the tests that kill a parent and check that
its worker processes do not outlive it."""

from pathlib import Path


def children(pid: int) -> list[int]:
    """Pids whose parent is ``pid``."""
    out = []
    for entry in Path("/proc").iterdir():
        if entry.name.isdigit():
            try:
                stat = (entry / "stat").read_text()
            except OSError:
                continue
            if int(stat.rsplit(")", 1)[1].split()[1]) == pid:
                out.append(int(entry.name))
    return out


def alive(pid: int) -> bool:
    """Whether ``pid`` runs (a zombie waiting for its parent does not count)."""
    try:
        return Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0] != "Z"
    except OSError:
        return False
