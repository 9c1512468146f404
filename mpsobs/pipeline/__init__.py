"""pipeline layer of mpsobs."""
