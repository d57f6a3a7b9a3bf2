"""Settings in one place, read from ``LEXIGROWTH_*`` environment variables."""

from __future__ import annotations

from functools import lru_cache
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path
from typing import Literal

from pydantic import Field
from pydantic_settings import BaseSettings, SettingsConfigDict

REPO_ROOT = Path(__file__).resolve().parent.parent
TEMPLATES_DIR = REPO_ROOT / "templates"
STATIC_DIR = REPO_ROOT / "static"
DEMO_DIR = REPO_ROOT / "demo_corpora"
LOOPBACK_NAMES = frozenset({"localhost", "127.0.0.1", "::1"})
"""The names of this computer itself: the server always answers for them; listening on them needs no accounts."""

try:
    PROGRAM_VERSION = version("lexigrowth")
except PackageNotFoundError:  # running from a source tree that was not installed
    PROGRAM_VERSION = "0.0.0+source"


class Settings(BaseSettings):
    """Environment: LEXIGROWTH_DATA_DIR, LEXIGROWTH_DATABASE_URL, LEXIGROWTH_MAX_UPLOAD_MB, LEXIGROWTH_LOAD_DEMO,
    LEXIGROWTH_TASK_WORKER, LEXIGROWTH_UPLOAD_WAIT_SECONDS,
    LEXIGROWTH_ALLOWED_HOSTS, LEXIGROWTH_TRUSTED_PROXIES,
    and for lab mode LEXIGROWTH_MODE, LEXIGROWTH_SECRET_KEY (see app.web.security)."""

    model_config = SettingsConfigDict(env_prefix="LEXIGROWTH_")

    data_dir: Path = Path("lexigrowth-data")
    database_url: str | None = None
    max_upload_mb: int = 200
    load_demo: bool = True
    # Run background tasks (counting uploads, fitting models) in a worker process of each server process;
    # off: in the thread that asks for them (tests, embedded use), so a request waits for them.
    task_worker: bool = True
    # Seconds an upload with ?wait=1 waits for its corpus before answering 202 with the job to poll.
    upload_wait_seconds: float = Field(default=60.0, gt=0)
    # "auto": lab mode (sign-in required) as soon as the store has an account; "lab": always lab mode.
    mode: Literal["auto", "lab"] = "auto"
    # Key that signs session cookies; empty: a random key kept in <data_dir>/secret_key (mode 0600).
    secret_key: str = Field(default="", repr=False)
    # Host names the server answers for besides localhost, 127.0.0.1 and ::1 (comma-separated); any other
    # Host header is refused, which stops DNS rebinding (app.web.security.AllowedHostsMiddleware).
    allowed_hosts: str = ""
    # Addresses or networks of reverse proxies (comma-separated, e.g. "127.0.0.1" or "10.0.0.0/8") whose
    # X-Forwarded-For and X-Forwarded-Proto uvicorn believes in `serve`; empty: none, the headers are ignored.
    trusted_proxies: str = ""

    @property
    def resolved_database_url(self) -> str:
        if self.database_url:
            return self.database_url
        return f"sqlite:///{(self.data_dir / 'lexigrowth.sqlite3').resolve()}"

    @property
    def host_names(self) -> list[str]:
        """The configured names of ``allowed_hosts``, lower case."""
        return _listed(self.allowed_hosts)

    @property
    def proxy_addresses(self) -> list[str]:
        """The configured addresses or networks of ``trusted_proxies``."""
        return _listed(self.trusted_proxies)

    @property
    def work_dir(self) -> Path:
        """Scratch space for uploads and temporary type-id sequences."""
        return private_dir(self.data_dir / "work")


def _listed(value: str) -> list[str]:
    """Comma- or blank-separated entries, lower case, without duplicates, in their order."""
    return list(dict.fromkeys(item for item in value.replace(",", " ").lower().split()))


def private_dir(path: Path) -> Path:
    """``path`` as a folder only its owner may enter (mode 0700), made if missing: the data folder holds
    password hashes, session keys and word counts, the scratch folder copies of uploaded texts."""
    path.mkdir(mode=0o700, parents=True, exist_ok=True)
    if path.stat().st_mode & 0o077:
        path.chmod(0o700)
    return path


@lru_cache
def get_settings() -> Settings:
    settings = Settings()
    private_dir(settings.data_dir)
    return settings
