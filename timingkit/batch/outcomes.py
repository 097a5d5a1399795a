"""What a batch run returns: one outcome per source and the run as a whole."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path



STATUS_OK, STATUS_FAILED = "ok", "failed"
STATUS_NOT_CONVERGED = "not_converged"   # outputs written, the fit did not converge


MAX_REASON_CHARS = 300   # a failure's reason is cut to this many characters


@dataclass
class SourceOutcome:
    """How one source ended: status ``ok``, ``not_converged`` (outputs written and
    marked) or ``failed``; ``reused`` when resume kept
    the previous result; ``elapsed_s`` and ``worker`` (host:pid) of the fit."""
    name: str
    status: str
    message: str
    reused: bool = False
    elapsed_s: float = float("nan")
    worker: str = ""


@dataclass
class BatchResult:
    """Outcome of :func:`run_batch`: one outcome and one summary row per source
    (input order), the engine used, wall time (s) and the summary files written."""
    outdir: Path
    outcomes: list[SourceOutcome]
    rows: list[dict]
    engine: str
    elapsed_s: float
    files: dict[str, Path] = field(default_factory=dict)

    @property
    def succeeded(self) -> list[str]:
        return [o.name for o in self.outcomes if o.status == STATUS_OK]

    @property
    def failed(self) -> list[str]:
        return [o.name for o in self.outcomes if o.status == STATUS_FAILED]

    @property
    def not_converged(self) -> list[str]:
        return [o.name for o in self.outcomes if o.status == STATUS_NOT_CONVERGED]

    @property
    def refitted(self) -> list[str]:
        """Sources handed to a worker in this run (not kept by resume, not unrunnable)."""
        return [o.name for o in self.outcomes if not o.reused and o.worker]

    @property
    def exit_status(self) -> int:
        """0 when every source succeeded, 3 when some failed, else 4 when some fits
        did not converge (CLI convention)."""
        return 3 if self.failed else 4 if self.not_converged else 0


def one_line(text: str) -> str:
    """``text`` on one line, cut to MAX_REASON_CHARS."""
    line = " ".join(str(text).split())
    return line if len(line) <= MAX_REASON_CHARS else line[:MAX_REASON_CHARS - 3] + "..."

