"""references layer of mpsobs."""
