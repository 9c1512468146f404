"""mpsobs."""
