"""Parameter variants of one slice's front side by side: the engine of the Compare board.

2 to 4 variants start alike (:class:`Start`: the same seed disks or the same
outline) and differ only in their settings (:class:`Variant`); each runs in
a thread of its own (:class:`VariantRun`, read as immutable frames), and
:func:`compare_table` sets their figures, Dice and HD95 side by side. No Qt
here.
"""

from engine.compare.run import VariantFrame, VariantRun
from engine.compare.table import CompareTable, MetricsRow, compare_table, mask_outline
from engine.compare.variants import (
    MAX_VARIANTS,
    MIN_VARIANTS,
    NAMES,
    Start,
    Variant,
    default_variants,
    settings_changes,
    starts_for,
)

__all__ = ["Start", "Variant", "VariantRun", "VariantFrame", "CompareTable", "MetricsRow", "compare_table",
           "mask_outline", "default_variants", "settings_changes", "starts_for", "NAMES", "MIN_VARIANTS",
           "MAX_VARIANTS"]
