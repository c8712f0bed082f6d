"""One settings object for the service, the CLI and Alembic.

Every setting can be given as an environment variable with the prefix ``TREEWRIGHT_``
(``TREEWRIGHT_DATA_DIR``, ``TREEWRIGHT_DATABASE_URL``...). The README lists them all; a test
fails when a setting is undocumented.
"""

from __future__ import annotations

import importlib.resources
import os
import secrets
from functools import lru_cache
from pathlib import Path
from typing import Literal

from pydantic import Field
from pydantic_settings import BaseSettings, SettingsConfigDict

#: The checkout's root folder (meaningful in a checkout only; an installed wheel has none).
PROJECT_ROOT = Path(__file__).resolve().parent.parent
#: Where a built wheel carries the top-level folders, inside the ``app`` package (setup.py).
BUNDLED = "_bundled"


def resource_path(name: str) -> Path:
    """A top-level folder or file of the project (``templates``, ``static``, ``migrations``,
    ``alembic.ini``): from the installed package's data when it was installed from a wheel,
    else from the checkout (a source tree or an editable install)."""
    bundled = importlib.resources.files("app").joinpath(BUNDLED, name)
    if bundled.is_dir() or bundled.is_file():
        return Path(str(bundled))
    return PROJECT_ROOT / name


TEMPLATES_DIR = resource_path("templates")
STATIC_DIR = resource_path("static")
MIGRATIONS_DIR = resource_path("migrations")
ALEMBIC_INI = resource_path("alembic.ini")


class Settings(BaseSettings):
    """Service configuration; defaults give a single-user SQLite install under ``./data``."""

    model_config = SettingsConfigDict(env_prefix="TREEWRIGHT_", extra="ignore", allow_inf_nan=False)

    data_dir: Path = Field(
        default=Path("data"),
        description="Folder for the SQLite database, the secret key and backups.",
    )
    database_url: str | None = Field(
        default=None,
        description="SQLAlchemy URL; default is "
        "SQLite at DATA_DIR/treewright.db. For PostgreSQL: "
        "postgresql+psycopg://user@host/dbname",
    )
    sqlite_busy_seconds: float = Field(
        default=15.0,
        gt=0,
        le=600,
        allow_inf_nan=False,
        description="How long a request waits for SQLite's "
        "write lock before it answers 503 (try again).",
    )
    host: str = Field(default="127.0.0.1", description="Address `serve` binds to.")
    port: int = Field(default=8000, description="Port `serve` listens on.")
    secret_key: str | None = Field(
        default=None,
        description="Key for signing; by default "
        "generated on first run into DATA_DIR/secret_key (mode 0600).",
    )
    max_upload_bytes: int = Field(
        default=20 * 1024 * 1024,
        description="Largest accepted upload or request body, in bytes (larger gets 413).",
    )
    session_hours: int = Field(default=12, description="Hours a login session lasts.")
    cookie_secure: bool = Field(
        default=False, description="Mark cookies Secure (set true behind TLS)."
    )
    suggestion_k: int = Field(default=5, description="Number of alternative trees offered.")
    login_delay_after: int = Field(
        default=3,
        description="Failed logins against one account "
        "(since its last successful login) before each further "
        "attempt at it is delayed.",
    )
    login_address_delay_after: int = Field(
        default=20,
        description="Failed logins from one "
        "address (against any accounts) before each "
        "further attempt from it is delayed.",
    )
    login_delay_seconds: float = Field(
        default=2.0, allow_inf_nan=False, description="Delay per failed login past the threshold."
    )
    training_in_process: bool = Field(
        default=False,
        description="Train grammars in a thread instead of a separate process (tests use this).",
    )
    job_runner: Literal["in_process", "workers"] = Field(
        default="in_process",
        description="Where grammar training and findings runs go: 'in_process' (a process "
        "started by each server, the only choice on SQLite) or 'workers' (PostgreSQL only: "
        "jobs are queued in the database and run by `treewright worker` processes).",
    )
    worker_stalled_seconds: float = Field(
        default=30.0,
        ge=1,
        le=3600,
        allow_inf_nan=False,
        description="With job_runner 'workers': a worker silent this long is taken for dead "
        "and its job is run again by another worker.",
    )
    parse_threads: int = Field(
        default=1, ge=1, le=64, description="numba threads each parse runs on."
    )
    parse_slots: int = Field(
        default=0,
        ge=0,
        le=64,
        description="Parses running at once per "
        "server process; 0 means the cores divided by parse_threads.",
    )
    parse_wait_seconds: float = Field(
        default=20.0,
        gt=0,
        le=600,
        allow_inf_nan=False,
        description="Longest a request waits for its parse "
        "before answering 503 (the parse goes on and is kept).",
    )
    parse_page_wait_seconds: float = Field(
        default=2.0,
        ge=0,
        le=600,
        allow_inf_nan=False,
        description="Longest the Bench page waits for its parse; "
        "then it is drawn with its place in the parse line, kept up to date, and shows the "
        "tree when the parse is done.",
    )
    parse_max_words: int = Field(
        default=100,
        ge=1,
        le=250,
        description="Longer sentences "
        "are not parsed on request; the Bench starts them flat and "
        "offers to split them.",
    )
    password_hash_cost: Literal["standard", "test"] = Field(
        default="standard",
        description="argon2 parameters for new password hashes: "
        "'standard' (argon2-cffi's defaults) or 'test' (cheap, for test suites only).",
    )

    @property
    def resolved_database_url(self) -> str:
        if self.database_url:
            return self.database_url
        return f"sqlite:///{(self.data_dir / 'treewright.db').resolve()}"

    @property
    def is_sqlite(self) -> bool:
        return self.resolved_database_url.startswith("sqlite")

    def ensure_data_dir(self) -> None:
        self.data_dir.mkdir(parents=True, exist_ok=True)

    def resolved_secret_key(self) -> str:
        """The signing key: the setting, else DATA_DIR/secret_key, created 0600 on first use."""
        if self.secret_key:
            return self.secret_key
        self.ensure_data_dir()
        path = self.data_dir / "secret_key"
        if not path.exists():
            fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
            with os.fdopen(fd, "w") as fh:
                fh.write(secrets.token_urlsafe(48))
        return path.read_text().strip()


@lru_cache
def get_settings() -> Settings:
    return Settings()
