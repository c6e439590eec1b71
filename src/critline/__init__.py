"""critline: refractive index readings from phone photos of a refractometer's eyepiece view."""

__version__ = "0.1.0"
