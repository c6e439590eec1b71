"""The eyepiece photo reader: from a phone photo of the refractometer's view to RI readings.

``read_photo(path, instrument=None, calibration=None, overlay_dir=None)`` runs the stages
load -> field -> frame/axis -> graduations -> vignetting crescent -> profile -> edges -> reading
(-> overlay) and returns a :class:`critline.readings.PhotoReading`; it never raises for a bad photo.
"""

from critline.photo.reading import read_photo

__all__ = ["read_photo"]
