"""The capacity model: the problem, requirements, results, use, uncertainty, sensitivity and
scenarios."""
