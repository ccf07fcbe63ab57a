"""The signal kinds ``measure`` knows, in a module without numpy (the command line's choices)."""

SIGNAL_KINDS = ("auto", "transitions", "sine", "multitone", "ramp", "other")
