"""The caution every report carries: one text, used by the CLI, the exports and the app."""

from __future__ import annotations

__all__ = ["CAUTION"]

#: One line (wrapped where it is printed): loopkit is a design aid, results must be verified on the
#: bench, converters can hurt people, and local codes and licensed practice come first.
CAUTION = ("Caution: a design aid; verify every loop on the bench. Converters store energy, batteries deliver"
           " large fault currents, mains and high voltages can kill: follow local codes and licensed practice.")
