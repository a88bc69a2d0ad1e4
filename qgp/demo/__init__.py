"""The bundled demo: an invented ice-thickness transect (see experiments/make_demo_data.py)."""

from importlib.resources import files
from pathlib import Path

__all__ = ["demo_config_path"]


def demo_config_path() -> Path:
    """Path of the bundled demo config (its CSVs sit beside it)."""
    return Path(str(files(__name__).joinpath("ice_transect.toml")))
