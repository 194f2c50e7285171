"""Exit codes of the command line, in one place for every command that runs a batch.

A pipeline tells from the code alone whether the records are whole and what they say.
"""

#: Every page passed.
EXIT_PASS = 0
#: Every page has its record, and some page did not pass (flagged, unrecognised or error).
EXIT_FLAGGED = 1
#: Usage error, or a template or zones file that cannot be read; nothing was checked.
EXIT_USAGE = 2
#: The records or the report are incomplete: an output could not be written (a full disk, an
#: I/O error, no permission) or the run was interrupted (SIGTERM, SIGINT). ``--resume`` continues.
EXIT_INCOMPLETE = 3

HELP = ("Exit codes: 0 every page passed; 1 some page did not; 2 usage error or unreadable template; "
        "3 records or report incomplete (an output could not be written, or the run was interrupted: "
        "repeat with --resume).")
