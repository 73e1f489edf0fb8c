"""Methods that combine several photos or maps of one part into one measurement.

:mod:`.averaging` averages photos of one part (aligned on the aperture, sign-checked,
with their spread); :mod:`.phase_shifting` measures a phase-shifted sequence of frames
(4-step, Hariharan, Carré, least squares); :mod:`.reference` subtracts a stored map of
the reference flat; :mod:`.three_flat` solves the absolute three-flat test. Each hands
its map to the same figures and records as a single photo.
"""
