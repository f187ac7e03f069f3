"""All settings of the service and the worker, read from flags or ``EPOCH_ASSAY_*`` variables."""

from functools import cached_property
from pathlib import Path

from pydantic import Field
from pydantic_settings import BaseSettings, SettingsConfigDict

MIB = 1024 * 1024


class Settings(BaseSettings):
    """One object for every setting; each field is also the env variable ``EPOCH_ASSAY_<NAME>``."""

    model_config = SettingsConfigDict(env_prefix="EPOCH_ASSAY_", frozen=True)

    data_dir: Path = Field(Path("var"), description="Folder for the SQLite database and the blob store.")
    database_url: str | None = Field(
        None, description="SQLAlchemy URL; default: SQLite in data_dir/epoch-assay.sqlite3."
    )
    max_upload_bytes: int = Field(512 * MIB, gt=0, description="Largest accepted request body, in bytes.")
    max_array_bytes: int = Field(
        4096 * MIB, gt=0, description="Largest total size of the arrays an uploaded file may declare, in bytes."
    )
    max_json_body_bytes: int = Field(8 * MIB, gt=0, description="Largest JSON request body (run specs), in bytes.")
    lease_seconds: float = Field(60.0, gt=1.0, le=3600.0, description="How long a claimed job is held without a heartbeat.")
    heartbeat_seconds: float = Field(10.0, gt=0.1, description="How often a running worker renews its lease.")
    poll_seconds: float = Field(0.5, gt=0.0, description="How often an idle worker looks for a job.")
    max_attempts: int = Field(3, ge=1, le=100, description="Attempts before a job whose worker keeps dying is failed.")

    @cached_property
    def resolved_database_url(self) -> str:
        if self.database_url:
            return self.database_url
        return f"sqlite:///{(self.data_dir / 'epoch-assay.sqlite3').resolve()}"

    @property
    def blob_dir(self) -> Path:
        return self.data_dir / "blobs"
