"""The station's widgets: the photo queue and one view per aspect of a measurement."""
