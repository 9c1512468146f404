"""estimators layer of mpsobs."""
