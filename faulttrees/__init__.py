"""Bundled demo fault trees (illustrative scenarios); installed with the package."""
