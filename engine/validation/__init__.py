"""Checks of what a caller passes in: settings' image-dependent limits."""

from engine.validation.limits import MAX_ANISOTROPY, SettingLimitError, check_limits, largest_sigma_mm

__all__ = ["MAX_ANISOTROPY", "SettingLimitError", "check_limits", "largest_sigma_mm"]
