"""The exit codes every ``rigloop`` command uses (the README's table)."""

EXIT_OK = 0            # done / completed
EXIT_INTERNAL = 1      # internal error, device unreachable, estimation failed
EXIT_USAGE = 2         # config or usage error: nothing moved
EXIT_TRIPPED = 3       # the run tripped
EXIT_PLAN_FAILED = 4   # the run completed but a test-plan criterion failed
EXIT_SIGNAL = 130      # stopped by Ctrl-C or SIGTERM (an e-stop)
