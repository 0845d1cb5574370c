"""``python -m allowance``: the command line, with Ctrl-C guarded from the first import."""

try:
    from allowance.console import command
except KeyboardInterrupt:  # the moment before the console module is loaded
    import os
    import sys

    sys.stderr.write("interrupted\n")
    sys.stderr.flush()
    os._exit(130)  # not SystemExit: see allowance.console.interrupted

command()
