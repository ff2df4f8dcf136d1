"""Loading a config: TOML text or a dict, validated, every swept point checked."""

from __future__ import annotations

import tomllib
from pathlib import Path

from pydantic import ValidationError

from .messages import messages
from .schema import Config, ConfigError
from .sweep import sweep_points

__all__ = ["parse_config", "load_config", "demo_config_path"]


def parse_config(raw: dict) -> Config:
    """Validate a config given as a dict (as TOML would load it)."""
    try:
        config = Config.model_validate(raw)
    except ValidationError as err:
        raise ConfigError(messages(err)) from None
    sweep_points(config)  # a swept value out of range is refused now, not mid-run
    return config


def load_config(path: str | Path) -> Config:
    """Read and validate a TOML config file; raise ConfigError naming each problem."""
    path = Path(path)
    if not path.is_file():
        raise ConfigError(f"config file {str(path)!r} not found")
    try:
        raw = tomllib.loads(path.read_text())
    except tomllib.TOMLDecodeError as err:
        raise ConfigError(f"{path}: not valid TOML: {err}") from None
    return parse_config(raw)


def demo_config_path() -> Path:
    """The demo experiment's config, shipped with the package (``sim/demo.toml``)."""
    return Path(__file__).parent.parent / "demo.toml"
