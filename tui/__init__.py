"""Flatsight's terminal side: the command line and the inspection station."""
