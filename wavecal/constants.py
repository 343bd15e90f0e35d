"""Physical constants used by wavecal, in one place.

Values are exact by definition where the SI makes them so; each carries its source.
"""
__all__ = ["SPEED_OF_LIGHT_KMS"]

#: Speed of light in vacuum in km/s (exact: SI definition of the metre, 1983; the same value as
#: ``astropy.constants.c``).
SPEED_OF_LIGHT_KMS: float = 299792.458
