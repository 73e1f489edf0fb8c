"""Flatsight's measurement library: fringe photo in, flatness figures out.

A pure numerical library (numpy, scipy, scikit-image, Pillow); it never imports
a user-interface package. Read the modules in the order the pipeline calls them:
``loading`` -> ``aperture`` -> ``carrier`` -> ``extension`` -> ``demodulation`` ->
``unwrapping`` -> ``zernike`` -> ``figures``, with ``pipeline`` tying them together and
``record`` writing the result down.
"""
