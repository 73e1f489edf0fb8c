"""The station's screens: the bench, help, settings and the photo picker."""
