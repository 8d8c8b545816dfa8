"""Inputs: reading and validation of the project file and its tables."""
