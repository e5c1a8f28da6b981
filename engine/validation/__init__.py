"""Checks of what a caller passes in, in one place: spacing, seeds, keyword names, settings' image-dependent limits.

- ``inputs``: spacing, seed disks, misspelt keywords
- ``limits``: upper limits of the settings that depend on the image
- ``arguments``: what a user gives the Session, the command line and a batch
  manifest (seeds, strokes, slices, step limits, detail, margins, names,
  colours, numbers and windows read from text)
"""

from engine.validation.arguments import (
    BLOCK_SIZES,
    DETAILS,
    MAX_FILE_NAME,
    MAX_LABEL_NAME,
    NODE_LAYOUTS,
    check_coarse,
    check_colour,
    check_detail,
    check_file_name,
    check_label_name,
    check_margin,
    check_nodes,
    check_seed,
    check_slice,
    check_steps,
    check_stroke,
    parse_number,
    parse_seed,
    parse_whole,
    parse_window,
)
from engine.validation.inputs import check_names, check_spacing, validate_seeds
from engine.validation.limits import MAX_ANISOTROPY, SettingLimitError, check_limits, largest_sigma_mm

__all__ = ["check_names", "check_spacing", "validate_seeds",
           "MAX_ANISOTROPY", "SettingLimitError", "check_limits", "largest_sigma_mm",
           "BLOCK_SIZES", "DETAILS", "MAX_FILE_NAME", "MAX_LABEL_NAME", "NODE_LAYOUTS", "check_coarse",
           "check_colour", "check_detail", "check_file_name", "check_label_name",
           "check_margin", "check_nodes", "check_seed", "check_slice", "check_steps", "check_stroke", "parse_number",
           "parse_seed", "parse_whole", "parse_window"]
