"""From H(s) to a runnable discrete model."""
