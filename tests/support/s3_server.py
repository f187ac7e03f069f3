"""An S3-compatible server for tests: moto's server as a real process on 127.0.0.1, stopped by its user.

The service finds it through the standard AWS variables (:attr:`S3Server.env`), as it would
find any S3-compatible store.
"""

import subprocess
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

import boto3
import httpx

from tests.support.live import free_port, stop


@dataclass
class S3Server:
    log_path: Path
    port: int = field(default_factory=free_port)
    process: subprocess.Popen | None = None

    @property
    def endpoint_url(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    @property
    def env(self) -> dict[str, str]:
        """The variables that point an S3 client at this server (keys are moto's test keys)."""
        return {
            "AWS_ENDPOINT_URL": self.endpoint_url,
            "AWS_ACCESS_KEY_ID": "testing",
            "AWS_SECRET_ACCESS_KEY": "testing",
            "AWS_DEFAULT_REGION": "us-east-1",
        }

    def start(self, timeout_s: float = 60.0) -> None:
        with open(self.log_path, "ab") as log:
            self.process = subprocess.Popen(
                [sys.executable, "-m", "moto.server", "-H", "127.0.0.1", "-p", str(self.port)],
                stdout=log,
                stderr=subprocess.STDOUT,
            )
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            if self.process.poll() is not None:
                raise RuntimeError(f"moto's server exited early:\n{self.log_path.read_text()[-4000:]}")
            try:
                httpx.get(self.endpoint_url, timeout=1.0)
                return
            except httpx.HTTPError:
                time.sleep(0.1)
        self.stop()
        raise RuntimeError(f"moto's server did not answer in {timeout_s} s")

    def create_bucket(self, name: str) -> None:
        self.client().create_bucket(Bucket=name)

    def client(self):  # type: ignore[no-untyped-def]
        """A boto3 S3 client of this server."""
        return boto3.client(
            "s3",
            endpoint_url=self.endpoint_url,
            aws_access_key_id="testing",
            aws_secret_access_key="testing",
            region_name="us-east-1",
        )

    def stop(self) -> None:
        if self.process is not None:
            stop(self.process)
