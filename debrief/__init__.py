"""debrief: the debrief after a thunderstorm.

Layers (imports point downward only): ``cli`` -> ``report`` / ``widgets`` -> core modules
(``flashes``, ``polarity``, ``continuing_current``, ``uncertainty``, ``geodesy``, ``sites``,
``alerts``, ``lines``, ``outages``) -> readers (``debrief.io``).
"""

__version__ = "0.1.0"
