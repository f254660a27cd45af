"""Fault-tree figures for reliability engineers: decision diagrams, cut sets, importance. Pure."""
