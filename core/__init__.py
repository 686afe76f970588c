"""wakeline core: the headless measurement of seamed-ball PIV shots (no Qt here)."""

import signal as _signal

__version__ = "0.3.18"

#: Signals that stop a run cleanly: Ctrl-C, a polite kill (shutdown, scheduler), the terminal
#: closing (a terminal sends the first and last to the whole process group). Here rather than in
#: ``core.batch`` so that the command line has them without importing the batch.
STOP_SIGNALS = tuple(getattr(_signal, name) for name in ("SIGINT", "SIGTERM", "SIGHUP")
                     if hasattr(_signal, name))


class WakelineError(Exception):
    """An error the user caused or can fix; its message is one line naming the file and problem."""
