"""chain layer of mpsobs."""
