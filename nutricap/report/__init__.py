"""Reporting: formats results it is handed; computes nothing."""
