"""The agreement harness: run every artifact in its real runtime and compare with the
reference evaluator."""
