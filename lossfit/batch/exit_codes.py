"""Exit codes of the command line (and of runs that scripts check).

0 success; 2 bad input (the message names the argument or job key); 3 the output
folder is locked or holds results that need ``--overwrite``; 75 stopped by SIGTERM or
SIGINT after saving the chain (run the same command to resume).
"""

__all__ = ["EXIT_OK", "EXIT_BAD_INPUT", "EXIT_CONFLICT", "EXIT_INTERRUPTED"]

EXIT_OK = 0
EXIT_BAD_INPUT = 2
EXIT_CONFLICT = 3
EXIT_INTERRUPTED = 75     # EX_TEMPFAIL of sysexits.h: the chain is saved, run again to resume
