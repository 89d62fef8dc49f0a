"""Process exit codes of the `warranty-forecast` command, for schedulers.

Every non-zero code leaves the output folder exactly as it was before the run.
"""

SUCCESS = 0
UNEXPECTED_ERROR = 1  # a bug or an environment failure: read the traceback in the log
BAD_ARGUMENTS = 2  # bad command-line arguments or configuration file
INPUT_UNREADABLE = 3  # an input file is missing, unreadable or not CSV/Parquet
INPUT_CONTRACT = 4  # an input file breaks the contract (missing required column, nothing usable)
OUTPUT_FAILED = 5  # the outputs could not be written (disk full, permissions)
