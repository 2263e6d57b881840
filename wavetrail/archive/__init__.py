"""Reviewer archives: pack a built project, verify an archive without trusting it.

- :func:`pack_project` writes a BagIt bag with an RO-Crate as one .zip or
  .tar.gz (raw data included, excluded or replaced by labelled stand-in rows),
  after a disclosure check.
- :func:`verify_archive` extracts it safely, validates the bag, checks the
  ledger and the provenance of every output, compares the environment with
  the lock and, on request, rebuilds and compares every output.

See docs/archive.md and docs/reviewer-guide.md.
"""

from wavetrail.archive.compare import compare_files
from wavetrail.archive.disclosure import check_outputs
from wavetrail.archive.pack import pack_project
from wavetrail.archive.safe_extract import Limits, safe_extract
from wavetrail.archive.stand_in import synthesize
from wavetrail.archive.verify import REBUILD_WARNING, VerifyReport, verify_archive

__all__ = [
    "pack_project",
    "verify_archive",
    "VerifyReport",
    "REBUILD_WARNING",
    "safe_extract",
    "Limits",
    "synthesize",
    "check_outputs",
    "compare_files",
]
