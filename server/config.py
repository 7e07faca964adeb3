"""Settings of railsign, read once from environment variables (RAILSIGN_*).

Nothing else in the package reads ``os.environ``; code takes a :class:`Settings`
object (tests build their own) or calls :func:`get_settings` for the process-wide one.
"""

from __future__ import annotations

from functools import lru_cache
from pathlib import Path

from pydantic import Field, field_validator
from pydantic_settings import BaseSettings, SettingsConfigDict

PLACEHOLDER_SECRET = "railsign-demo-secret-change-me"
REPO_ROOT = Path(__file__).resolve().parent.parent
WEB_DIR = REPO_ROOT / "web"


class Settings(BaseSettings):
    """Every setting, with its environment variable ``RAILSIGN_<NAME>``."""

    model_config = SettingsConfigDict(env_prefix="RAILSIGN_", extra="ignore")

    database_url: str = Field(
        "sqlite:///./railsign.db",
        description="SQLAlchemy URL: sqlite:///FILE or postgresql+psycopg://USER@HOST:PORT/DB",
    )
    host: str = Field("127.0.0.1", description="address that `railsign serve` listens on")
    port: int = Field(8000, description="port that `railsign serve` listens on")
    web_workers: int = Field(1, ge=1, description="web processes started by `railsign serve`")
    worker_threads: int = Field(
        2, ge=0, description="analysis worker threads inside each web process (0: none, use `railsign worker`)"
    )
    job_lease_s: float = Field(
        30.0, gt=0, description="seconds without a heartbeat after which a running job is claimed again"
    )
    job_max_attempts: int = Field(3, ge=1, description="attempts before a job is failed with its last error")
    secret_key: str = Field(PLACEHOLDER_SECRET, description="key that signs session cookies and CSRF tokens")
    demo: bool = Field(False, description="demo mode: tolerates the placeholder secret key")
    cookie_secure: bool = Field(False, description="send the session cookie only over HTTPS")
    session_max_age_s: int = Field(8 * 3600, gt=0, description="seconds a login session lasts")
    login_max_failures: int = Field(5, ge=1, description="failed logins of one account from one address before that account is refused there")
    login_lockout_s: float = Field(300.0, gt=0, description="seconds an account is refused at an address after too many failures there")
    login_slowdown_s: float = Field(
        0.5, ge=0, description="delay of a login attempt after one recent failure, doubled with each further "
        "failure up to 16 times (0: no delay); failures older than login_lockout_s are forgotten"
    )
    max_concurrent_requests: int = Field(
        8, ge=1, description="requests one web process works on at once; more wait for a turn (see busy_wait_s)"
    )
    busy_wait_s: float = Field(
        1.0, gt=0, description="seconds a request waits for each turn it needs (a request slot, a database "
        "connection, on SQLite the write lock) before it is answered 503 with Retry-After"
    )
    max_request_bytes: int = Field(2_000_000, ge=1024, description="largest request body accepted (413 above it)")
    log_level: str = Field("INFO", description="logging level: DEBUG, INFO, WARNING, ERROR")
    sql_echo: bool = Field(False, description="log every SQL statement (debugging)")

    @field_validator("database_url")
    @classmethod
    def _known_database(cls, url: str) -> str:
        if not (url.startswith("sqlite") or url.startswith("postgresql")):
            raise ValueError("RAILSIGN_DATABASE_URL must be a sqlite:// or postgresql+psycopg:// URL")
        if url.startswith("postgresql://") or url.startswith("postgres://"):
            url = "postgresql+psycopg://" + url.split("://", 1)[1]
        return url

    def check_secret(self) -> None:
        """Refuse the placeholder secret outside demo mode (called where the secret is used)."""
        if self.secret_key == PLACEHOLDER_SECRET and not self.demo:
            raise ValueError(
                "RAILSIGN_SECRET_KEY is the placeholder value: set a long random secret "
                "(or use `railsign demo`, which tolerates it)"
            )

    @property
    def is_sqlite(self) -> bool:
        return self.database_url.startswith("sqlite")


@lru_cache(maxsize=1)
def get_settings() -> Settings:
    """The process-wide settings, read from the environment once."""
    return Settings()
