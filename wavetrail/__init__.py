"""wavetrail: reproducible analysis of multi-wave panel studies.

The public surface is small: the error tree below and the statistics modules
``wavetrail.growth``, ``wavetrail.sem``, ``wavetrail.scoring`` and
``wavetrail.forest``: ``fit_growth`` returns a ``GrowthFit`` (``.estimates`` table,
``.fit`` dict of indices), ``sem.fit``/``sem.fit_cfa`` a ``SemFit``, ``grow_tree`` a
``Tree`` and ``grow_forest`` a ``Forest``. The methods pages under docs/methods/ give the
arguments and the sources.
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
