"""The method names, in a module without numpy or scipy (the command line's choices)."""

#: The method names, in the order the help lists them.
METHODS: tuple[str, ...] = (
    "bilinear",
    "impulse-invariant",
    "step-invariant",
    "ramp-invariant",
    "matched-z",
)

#: The method used when none is named.
DEFAULT_METHOD = "ramp-invariant"
