"""Where a campaign run keeps its files, and the environment variables a run reads.
"""

from __future__ import annotations

from pathlib import Path


JOURNAL_NAME = "campaign.journal"


CAMPAIGN_COPY = "campaign.toml"


WORKER_INDEX_ENV = "TUNNELSMITH_WORKER_INDEX"


STORAGE_ENV = "TUNNELSMITH_STORAGE"


#: Process id of the main process that started a local worker: the worker stops when
#: that process is gone.
PARENT_PID_ENV = "TUNNELSMITH_PARENT_PID"


def default_run_dir(spec) -> Path:
    """``runs/<campaign name>/`` below the current directory."""
    safe = "".join(c if c.isalnum() or c in "-_." else "_" for c in spec.name) or "campaign"
    return Path("runs") / safe


def journal_path(run_dir: Path) -> Path:
    return Path(run_dir) / JOURNAL_NAME
