"""The bundled demo: an invented ice-thickness transect (see experiments/make_demo_data.py)."""

from importlib.resources import files
from pathlib import Path

__all__ = ["demo_config_path", "scale_config_path"]


def demo_config_path() -> Path:
    """Path of the bundled demo config (its CSVs sit beside it)."""
    return Path(str(files(__name__).joinpath("ice_transect.toml")))


def scale_config_path() -> Path:
    """Path of the bundled ``qgp scale`` config: the same lake surveyed by radar, 2^17 traces."""
    return Path(str(files(__name__).joinpath("ice_radar.toml")))
