"""Readers and writers of the file formats edopt uses (case files, netlists)."""
