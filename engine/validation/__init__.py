"""Checks of what a caller passes in, in one place: spacing, seeds, keyword names, settings' image-dependent limits.

- ``inputs``: spacing, seed disks, misspelt keywords
- ``limits``: upper limits of the settings that depend on the image
"""

from engine.validation.inputs import check_names, check_spacing, validate_seeds
from engine.validation.limits import MAX_ANISOTROPY, SettingLimitError, check_limits, largest_sigma_mm

__all__ = ["check_names", "check_spacing", "validate_seeds",
           "MAX_ANISOTROPY", "SettingLimitError", "check_limits", "largest_sigma_mm"]
