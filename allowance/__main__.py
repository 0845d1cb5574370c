"""``python -m allowance``: the command line, with Ctrl-C guarded from the first import."""

try:
    from allowance.console import main
except KeyboardInterrupt:  # the moment before the console module is loaded
    import sys

    sys.stderr.write("interrupted\n")
    raise SystemExit(130) from None

main()
