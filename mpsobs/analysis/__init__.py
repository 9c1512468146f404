"""analysis layer of mpsobs."""
