"""The rule language."""
