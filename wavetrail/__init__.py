"""wavetrail: reproducible analysis of multi-wave panel studies.

The public surface is small: the error tree below and the statistics modules
``wavetrail.growth``, ``wavetrail.sem``, ``wavetrail.scoring`` and
``wavetrail.forest`` (see DESIGN section 2.3 and docs/).
"""

from wavetrail.errors import (
    ArchiveError,
    BuildError,
    CodebookError,
    ConfigError,
    DataError,
    ProjectError,
    RegistryError,
    UsageError,
    WavetrailError,
)

__version__ = "0.1.0"

__all__ = [
    "__version__",
    "WavetrailError",
    "UsageError",
    "ConfigError",
    "CodebookError",
    "DataError",
    "ProjectError",
    "RegistryError",
    "BuildError",
    "ArchiveError",
]
