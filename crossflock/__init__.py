"""crossflock: does the continuum (Toner-Tu) description of a polar flock hold?

Public surface of the shared core. The engines and the comparison layer are the
subpackages :mod:`crossflock.agents`, :mod:`crossflock.continuum` and
:mod:`crossflock.compare`.
"""

from ._config import (
    Config,
    ConsistencyWarning,
    config_from_toml,
    config_to_toml,
    load_config,
)
from ._errors import (
    CheckFailed,
    ConfigError,
    CrossflockError,
    InputError,
    NotBuiltError,
    NumericalError,
)
from ._geometry import Geometry, geometry_from_config
from ._io import dataset_config, read_dataset, write_dataset
from ._version import __version__

__all__ = [
    "__version__",
    "Config",
    "ConsistencyWarning",
    "load_config",
    "config_to_toml",
    "config_from_toml",
    "CrossflockError",
    "ConfigError",
    "InputError",
    "NotBuiltError",
    "NumericalError",
    "CheckFailed",
    "Geometry",
    "geometry_from_config",
    "read_dataset",
    "write_dataset",
    "dataset_config",
]
