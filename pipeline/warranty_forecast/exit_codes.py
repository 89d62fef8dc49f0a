"""Process exit codes of the `warranty-forecast` command, for schedulers.

A non-zero code means this run published nothing: the published runs under the output root and its
`latest` link are as they were. One exception: a signal that arrives after the run's folder was renamed
into place, while the history and `latest` are being updated, exits 128+N although the run's folder is
published; the next run records it and points `latest` at it.
"""

SUCCESS = 0
UNEXPECTED_ERROR = 1  # a bug or an environment failure: read the traceback in the log
BAD_ARGUMENTS = 2  # bad command-line arguments or configuration file (including an impossible as-of date)
INPUT_UNREADABLE = 3  # an input file is missing, unreadable or not CSV/Parquet
INPUT_CONTRACT = 4  # an input file breaks the contract as a whole (header, nothing usable)
OUTPUT_FAILED = 5  # the outputs could not be written (disk full, permissions, a folder this tool did not write)
TOO_MANY_QUARANTINED = 6  # an extract's quarantined share is above the configured ceiling; nothing published
ALREADY_RUNNING = 7  # another run holds the lock on the same output root
INTERRUPTED_BASE = 128  # stopped by a signal: 128 + the signal number (130 for SIGINT, 143 for SIGTERM)
