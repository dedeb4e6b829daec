"""What a run's report shows, read from the run: the data classes the report's builder fills
and its page renders (`bench.report.build`, `bench.report.html`), and the choice of analyses."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from bench import __version__
from bench.config import BenchConfig
from bench.records import Estimate, Event

#: ``analysis`` choices besides an analysis id.
LIVE = "live"
ALL = "all"


@dataclass(frozen=True)
class FigureFile:
    """One figure written for the report."""

    key: str  # "signals", "estimates", "decay-a1", ...
    path: Path
    title: str
    caption: str


@dataclass
class AnalysisData:
    """One analysis of the run: its row of `RunReader.analyses`, estimates and summary."""

    id: int
    kind: str
    info: Mapping[str, Any]
    overrides: Mapping[str, str]
    overridden: list[tuple[str, str, str]]  # (key, as recorded, override)
    estimates: list[Estimate]
    final: Estimate | None
    summary: Mapping[str, Any]

    @property
    def label(self) -> str:
        return f"analysis {self.id} ({self.kind})"


@dataclass
class ReportData:
    """Everything the page shows, read from one run."""

    run_path: Path
    run_id: str
    status: str
    meta: Mapping[str, Any]
    cfg: BenchConfig
    duration_s: float | None
    block_count: int
    all_analyses: list[Mapping[str, Any]]
    analyses: list[AnalysisData]
    events: list[Event]
    truth: list[Mapping[str, Any]]
    trips: list[Mapping[str, Any]]
    software_version: str = __version__
    generated_at: str = ""
    extra: dict[str, Any] = field(default_factory=dict)

    @property
    def simulated(self) -> bool:
        return bool(self.meta.get("simulated"))


# --------------------------------------------------------------------------------------------
# Choosing analyses


def parse_analysis(text: str | int | None) -> str | int:
    """``"live"`` / None, ``"all"``, or an analysis id (``"2"``); ValueError otherwise."""
    if text is None:
        return LIVE
    if isinstance(text, bool):
        raise ValueError(f"analysis: expected an analysis id, 'live' or 'all', got {text!r}")
    if isinstance(text, int):
        if text < 1:
            raise ValueError(f"analysis: analysis ids start at 1, got {text}")
        return text
    t = str(text).strip().lower()
    if t in (LIVE, ALL):
        return t
    try:
        n = int(t)
    except ValueError:
        raise ValueError(f"analysis: expected an analysis id, 'live' or 'all', got {text!r}") from None
    return parse_analysis(n)
