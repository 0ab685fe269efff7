"""Shared test setup: this folder is on ``sys.path``, so test modules in the sub-folders (which mirror the
package folders) import the shared helpers (``_sklearn_checks``) by name."""
