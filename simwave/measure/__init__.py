"""What the output did: transient and steady-state metrics."""
