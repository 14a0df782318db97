"""Independent reference models for the tests (never call the code under test)."""
