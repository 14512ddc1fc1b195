"""Settings from environment variables (prefix WAKELEDGER_, plus DATABASE_URL)."""

from __future__ import annotations

from functools import lru_cache

from pydantic import AliasChoices, Field
from pydantic_settings import BaseSettings, SettingsConfigDict


class Settings(BaseSettings):
    model_config = SettingsConfigDict(env_prefix="WAKELEDGER_", extra="ignore")

    database_url: str = Field(
        default="sqlite:///./wakeledger.db",
        validation_alias=AliasChoices("DATABASE_URL", "WAKELEDGER_DATABASE_URL"),
    )
    # Largest request body accepted, in bytes (a 5,000-shot batch is about 5 MB).
    max_body_bytes: int = 16 * 1024 * 1024
    max_batch_shots: int = 5000
    # Demo mode: visitors may read pages and the read API without a token.
    demo_mode: bool = False
    # Cookie flag for the dashboard session; set true behind HTTPS.
    secure_cookies: bool = False
    # Run `db upgrade` at start-up.
    migrate_on_start: bool = True


@lru_cache
def get_settings() -> Settings:
    return Settings()
