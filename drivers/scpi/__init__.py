"""SCPI layer: wire formats (pure functions) and the session above the transport."""
