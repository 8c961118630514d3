"""Foreign files in: oxygen logger exports (:mod:`swimlab.io.logger`).

Nothing here computes science; readers turn files into validated values and report what they
found, and never change the raw bytes.
"""

from swimlab.io.logger import (
    ColumnMapping,
    LoggerTrace,
    SniffResult,
    guess_mapping,
    header_fingerprint,
    read_logger,
    sha256_hex,
    sniff,
)

__all__ = [
    "ColumnMapping",
    "LoggerTrace",
    "SniffResult",
    "guess_mapping",
    "header_fingerprint",
    "read_logger",
    "sha256_hex",
    "sniff",
]
