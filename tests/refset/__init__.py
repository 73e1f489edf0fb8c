"""Independent reference set: synthetic fringe photos of known surfaces and their truth figures."""
