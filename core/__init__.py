"""wakeline core: the headless measurement of seamed-ball PIV shots (no Qt here)."""

__version__ = "0.3.15"


class WakelineError(Exception):
    """An error the user caused or can fix; its message is one line naming the file and problem."""
