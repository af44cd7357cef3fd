"""Readers and writers: target files, tables, run folders."""
