"""What a step did, recorded next to every result."""

from dataclasses import asdict, dataclass, field
from typing import Any


@dataclass
class ComponentRemoved:
    """An ICA component taken out of the data."""

    index: int
    kind: str
    score: float


@dataclass
class StepRecord:
    """One record per applied step; fields stay empty where nothing changed.

    ``trials_removed_ids`` lists the ``trial_id`` of each removed trial when the upload gave trial
    ids. ``seconds`` is the wall time the step took; ``stage`` is ``"epochs"`` for steps run on
    epoched data and ``"continuous"`` for steps run on a recording before epoching; ``run`` is
    the run (1-based) a continuous-stage record belongs to when a session has several runs.
    """

    step: str
    params: dict[str, Any]
    channels_flagged: dict[str, list[str]] = field(default_factory=dict)
    channels_dropped: list[str] = field(default_factory=list)
    channels_interpolated: list[str] = field(default_factory=list)
    trials_removed: dict[str, int] = field(default_factory=dict)
    trials_removed_ids: list[str] = field(default_factory=list)
    components_removed: list[ComponentRemoved] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)
    seconds: float = 0.0
    stage: str = "epochs"
    run: int | None = None

    def to_json(self) -> dict[str, Any]:
        return asdict(self)
