"""core layer of mpsobs."""
