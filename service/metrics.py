"""Prometheus metrics of the API process, with the queue's figures read from the database.

Workers may run on other machines, so nothing is shared between processes through memory
or files: at each scrape the API reads the queue depth, runs and deliveries by state and the
workers alive from the database, and observes the durations (``finished_at − started_at``)
of the runs that finished since the previous scrape. Counters and histograms therefore
start at zero when the API process starts, as Prometheus expects of any process.
"""

import threading
from datetime import datetime, timedelta

from prometheus_client import CollectorRegistry, Counter, Gauge, Histogram
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from service.storage import queue
from service.storage.ids import utc_now
from service.storage.models import Job, Run, WebhookDelivery

RUN_STATUSES = (queue.QUEUED, queue.RUNNING, queue.SUCCEEDED, queue.FAILED)
DELIVERY_STATUSES = ("pending", "delivered", "failed")
RUN_DURATION_BUCKETS = (0.5, 1, 2, 5, 10, 30, 60, 120, 300, 600, 1800, 3600, 7200, float("inf"))
# A run committed a little after a later-finishing one is still seen: each scan looks back this far.
_LOOK_BACK = timedelta(seconds=120)


class ServiceMetrics:
    """Every metric of the service, in its own registry."""

    def __init__(self, worker_stale_seconds: float) -> None:
        self.registry = CollectorRegistry()
        self._stale = timedelta(seconds=worker_stale_seconds)
        self.http_requests = Counter(
            "epoch_assay_http_requests",
            "HTTP requests answered.",
            ["method", "route", "status"],
            registry=self.registry,
        )
        self.http_latency = Histogram(
            "epoch_assay_http_request_duration_seconds",
            "Time to answer a request.",
            ["method", "route"],
            registry=self.registry,
        )
        self.queue_depth = Gauge("epoch_assay_queue_depth", "Jobs waiting to be claimed.", registry=self.registry)
        self.oldest_queued = Gauge(
            "epoch_assay_queue_oldest_age_seconds",
            "Age of the oldest waiting job (0 when none waits).",
            registry=self.registry,
        )
        self.runs = Gauge("epoch_assay_runs", "Runs by state.", ["status"], registry=self.registry)
        self.workers = Gauge("epoch_assay_workers_alive", "Workers heard from recently.", registry=self.registry)
        self.deliveries = Gauge(
            "epoch_assay_webhook_deliveries", "Webhook deliveries by state.", ["status"], registry=self.registry
        )
        self.runs_finished = Counter(
            "epoch_assay_runs_finished", "Runs that finished, by outcome.", ["status"], registry=self.registry
        )
        self.run_duration = Histogram(
            "epoch_assay_run_duration_seconds",
            "Time from the start of a run's last attempt to its end.",
            ["status"],
            buckets=RUN_DURATION_BUCKETS,
            registry=self.registry,
        )
        for status in (queue.SUCCEEDED, queue.FAILED):
            self.runs_finished.labels(status)
        self._lock = threading.Lock()
        self._started = utc_now()
        self._newest_seen = self._started
        self._counted: dict[str, datetime] = {}

    def observe_request(self, method: str, route: str, status: int, seconds: float) -> None:
        self.http_requests.labels(method, route, str(status)).inc()
        self.http_latency.labels(method, route).observe(seconds)

    def refresh(self, session: Session) -> None:
        """Read the database's figures into the gauges and count newly finished runs."""
        now = utc_now()
        with self._lock:
            self.queue_depth.set(queue.queue_depth(session))
            oldest = session.scalar(select(func.min(Job.created_at)).where(Job.status == queue.QUEUED))
            self.oldest_queued.set(0.0 if oldest is None else max((now - oldest).total_seconds(), 0.0))
            runs = session.execute(select(Run.status, func.count()).group_by(Run.status)).tuples()
            self._set_by_status(self.runs, RUN_STATUSES, dict(runs.all()))
            deliveries = session.execute(
                select(WebhookDelivery.status, func.count()).group_by(WebhookDelivery.status)
            ).tuples()
            self._set_by_status(self.deliveries, DELIVERY_STATUSES, dict(deliveries.all()))
            self.workers.set(queue.workers_seen_since(session, now - self._stale))
            self._count_finished_runs(session)

    @staticmethod
    def _set_by_status(gauge: Gauge, statuses: tuple[str, ...], counts: dict[str, int]) -> None:
        for status in statuses:
            gauge.labels(status).set(counts.get(status, 0))

    def _count_finished_runs(self, session: Session) -> None:
        rows = session.execute(
            select(Run.id, Run.status, Run.started_at, Run.finished_at).where(
                Run.finished_at >= self._scan_from(), Run.status.in_((queue.SUCCEEDED, queue.FAILED))
            )
        ).all()
        for run_id, status, started_at, finished_at in rows:
            # The query keeps finished runs only, so finished_at is set.
            if run_id in self._counted or finished_at is None:
                continue
            self._counted[run_id] = finished_at
            self._newest_seen = max(self._newest_seen, finished_at)
            self.runs_finished.labels(status).inc()
            if started_at is not None:
                self.run_duration.labels(status).observe(max((finished_at - started_at).total_seconds(), 0.0))
        scan_from = self._scan_from()
        self._counted = {run_id: at for run_id, at in self._counted.items() if at >= scan_from}

    def _scan_from(self) -> datetime:
        return max(self._started, self._newest_seen - _LOOK_BACK)
