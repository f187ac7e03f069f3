"""All settings of the service and the worker, read from flags or ``EPOCH_ASSAY_*`` variables."""

import ipaddress
from functools import cached_property
from pathlib import Path
from urllib.parse import urlsplit

from pydantic import Field, field_validator, model_validator
from pydantic_settings import BaseSettings, SettingsConfigDict

MIB = 1024 * 1024
DASK_SCHEMES = ("tcp", "tls", "ws", "wss")


class Settings(BaseSettings):
    """One object for every setting; each field is also the env variable ``EPOCH_ASSAY_<NAME>``."""

    model_config = SettingsConfigDict(env_prefix="EPOCH_ASSAY_", frozen=True)

    data_dir: Path = Field(Path("var"), description="Folder for the SQLite database and the blob store.")
    database_url: str | None = Field(
        None, description="SQLAlchemy URL; default: SQLite in data_dir/epoch-assay.sqlite3."
    )
    max_upload_bytes: int = Field(512 * MIB, gt=0, description="Largest accepted request body, in bytes.")
    max_array_bytes: int = Field(
        2048 * MIB,
        gt=0,
        description="Largest total size of the arrays an uploaded file may declare, and of a recording cut into "
        "epochs, in bytes.",
    )
    max_compression_ratio: float = Field(
        10.0,
        ge=1.0,
        description="Most an NPZ file's arrays may declare, as a multiple of the file's size (plus 1 MiB); "
        "recorded EEG compresses about 1x to 4x (measured on our own files), a zip bomb about 1000x.",
    )
    max_json_body_bytes: int = Field(8 * MIB, gt=0, description="Largest JSON request body (run specs), in bytes.")
    lease_seconds: float = Field(
        60.0, gt=1.0, le=3600.0, description="How long a claimed job is held without a heartbeat."
    )
    heartbeat_seconds: float = Field(10.0, gt=0.1, description="How often a running worker renews its lease.")
    poll_seconds: float = Field(0.5, gt=0.0, description="How often an idle worker looks for a job.")
    max_attempts: int = Field(
        3, ge=1, le=100, description="Attempts before a job that keeps failing (or whose worker keeps dying) is failed."
    )
    retry_backoff_seconds: float = Field(
        5.0, ge=0.0, description="Wait before retrying a failed attempt; doubled at each further attempt."
    )
    open: bool = Field(False, description="Turn access control off (only allowed on a loopback address).")
    idempotency_ttl_seconds: float = Field(
        86400.0, gt=0.0, description="How long the answer to a POST with an Idempotency-Key is kept for replay."
    )
    webhook_max_attempts: int = Field(10, ge=1, le=100, description="Delivery attempts of one webhook event.")
    webhook_backoff_seconds: float = Field(
        10.0, gt=0.0, description="Wait after the first failed delivery; doubled at each further attempt."
    )
    webhook_backoff_max_seconds: float = Field(
        3600.0, gt=0.0, description="Longest wait between two delivery attempts."
    )
    webhook_timeout_seconds: float = Field(
        5.0, gt=0.0, le=300.0, description="Timeout of one delivery request (connect, send and answer), in s."
    )
    webhook_allowed_networks: str = Field(
        "",
        description="Comma-separated CIDR networks webhooks may reach although they are loopback, private, "
        "link-local or reserved (e.g. 10.20.0.0/16 for a LIMS on the lab's network); empty: none.",
    )
    max_webhooks_per_study: int = Field(10, ge=1, le=1000, description="Most webhooks one study may have.")
    webhook_senders: int = Field(
        4, ge=1, le=64, description="Deliveries a worker sends at once, never two for the same study."
    )
    worker_stale_seconds: float = Field(
        60.0, gt=0.0, description="/readyz wants a worker heard from within this many seconds."
    )
    max_pipelines: int = Field(
        512, ge=1, le=100_000, description="Most pipelines a run may have, listed or expanded from a grid."
    )
    max_run_units: int = Field(
        20_000,
        ge=1,
        description="Most pipelines × epoch sets one run may have (each pair adds a score to the stored result).",
    )
    max_steps_per_pipeline: int = Field(64, ge=1, le=10_000, description="Most steps one pipeline may have.")
    cache_dir: Path | None = Field(None, description="Folder of the step cache; default data_dir/step-cache.")
    cache_max_bytes: int = Field(
        8192 * MIB, ge=0, description="Largest total size of the step cache, in bytes; 0 turns the cache off."
    )
    cache_min_step_seconds: float = Field(
        0.2, ge=0.0, description="Outputs of steps faster than this are recomputed rather than cached, in s."
    )
    blob_url: str | None = Field(
        None,
        description="fsspec URL of the blob store shared by several hosts (file:///mnt/shared/blobs, s3://bucket/prefix); "
        "default: the local folder data_dir/blobs.",
    )
    blob_cache_max_bytes: int = Field(
        8192 * MIB, ge=0, description="Largest total size of the local copies of blobs read from blob_url, in bytes."
    )
    dask_scheduler: str | None = Field(
        None,
        description="Address of a Dask distributed scheduler (tcp://host:8786) that runs a run's units; "
        "default: a local process pool of parallel_workers.",
    )
    parallel_workers: int | None = Field(
        None, ge=1, le=256, description="Worker processes that share a run's units; default: all cores."
    )

    @field_validator("blob_url")
    @classmethod
    def _blob_url_usable(cls, url: str | None) -> str | None:
        """An fsspec URL with an installed driver; an empty value means the local folder."""
        from service.storage.blob_fsspec import check_blob_url  # fsspec is loaded only when a URL is set

        return check_blob_url(url) if url else None

    @field_validator("dask_scheduler")
    @classmethod
    def _dask_scheduler_address(cls, address: str | None) -> str | None:
        """``scheme://host:port``; an empty value means no scheduler."""
        if not address:
            return None
        parts = urlsplit(address)
        try:
            port = parts.port
        except ValueError:
            port = None
        bare = address == f"{parts.scheme}://{parts.netloc}"
        if parts.scheme not in DASK_SCHEMES or not parts.hostname or port is None or not bare:
            raise ValueError(
                f"{address!r} is not a Dask scheduler address: give scheme://host:port with scheme "
                f"{', '.join(DASK_SCHEMES)}, such as tcp://scheduler.lab:8786"
            )
        return address

    @field_validator("webhook_allowed_networks")
    @classmethod
    def _networks(cls, networks: str) -> str:
        for part in networks.split(","):
            if part.strip():
                try:
                    ipaddress.ip_network(part.strip(), strict=False)
                except ValueError:
                    raise ValueError(
                        f"{part.strip()!r} is not a network in CIDR notation, such as 10.20.0.0/16"
                    ) from None
        return networks

    @cached_property
    def allowed_webhook_networks(self) -> tuple[ipaddress.IPv4Network | ipaddress.IPv6Network, ...]:
        """The networks of ``webhook_allowed_networks``, parsed."""
        return tuple(
            ipaddress.ip_network(part.strip(), strict=False)
            for part in self.webhook_allowed_networks.split(",")
            if part.strip()
        )

    @model_validator(mode="after")
    def _heartbeat_within_lease(self) -> "Settings":
        if self.heartbeat_seconds * 2 > self.lease_seconds:
            raise ValueError(
                f"heartbeat_seconds ({self.heartbeat_seconds}) must be at most half of lease_seconds "
                f"({self.lease_seconds}), or a busy worker loses its job between two heartbeats"
            )
        return self

    @cached_property
    def resolved_database_url(self) -> str:
        if self.database_url:
            return self.database_url
        return f"sqlite:///{(self.data_dir / 'epoch-assay.sqlite3').resolve()}"

    @property
    def blob_dir(self) -> Path:
        return self.data_dir / "blobs"

    @property
    def blob_cache_dir(self) -> Path:
        """Where a host keeps verified local copies of the blobs it read from blob_url."""
        return self.data_dir / "blob-cache"

    @property
    def step_cache_dir(self) -> Path | None:
        """The step cache folder, None when the cache is off."""
        if self.cache_max_bytes == 0:
            return None
        return self.cache_dir if self.cache_dir is not None else self.data_dir / "step-cache"
