"""What a Dask scheduler recorded about tasks, for tests that run units on a cluster."""

from distributed import Client

UNIT_PREFIX = "epoch-assay-unit"  # the name part of the keys worker.execution.dask_units gives units


def state_counts(client: Client, prefix: str = UNIT_PREFIX) -> dict[str, int]:
    """How many times the scheduler's tasks whose key starts with ``prefix`` entered each state
    (``processing`` once per attempt, ``memory`` once per result computed)."""
    return client.run_on_scheduler(
        lambda dask_scheduler, name=prefix: (
            dict(dask_scheduler.task_prefixes[name].state_counts) if name in dask_scheduler.task_prefixes else {}
        )
    )
