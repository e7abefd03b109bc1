"""Test quality: raw-curve analysis, shape descriptors, and SPIRO-2019 / DLCO-2017 / LV-2005
acceptability, grades and value selection.

Pure computation (no UI, plotting or I/O). The results feed the interpretation document's
``quality`` block through :func:`quality_block`.
"""

from __future__ import annotations

from typing import Any

from pftwork.quality.curves import CurveAnalysis, analyse_curve
from pftwork.quality.diffusion import DiffusionQuality, assess_diffusion
from pftwork.quality.plethysmography import VolumeQuality, assess_plethysmography
from pftwork.quality.shape import ShapeDescriptors, shape_descriptors, upper_airway_indices
from pftwork.quality.spirometry import (
    ManeuverQuality,
    SpirometryQuality,
    assess_spirometry_set,
    grade_values,
    not_assessable,
)

__all__ = [
    "CurveAnalysis",
    "DiffusionQuality",
    "ManeuverQuality",
    "ShapeDescriptors",
    "SpirometryQuality",
    "VolumeQuality",
    "analyse_curve",
    "assess_diffusion",
    "assess_plethysmography",
    "assess_spirometry_set",
    "grade_values",
    "not_assessable",
    "quality_block",
    "shape_descriptors",
    "upper_airway_indices",
]


def quality_block(pre: SpirometryQuality | None = None, post: SpirometryQuality | None = None,
                  diffusion: DiffusionQuality | None = None,
                  volumes: VolumeQuality | None = None) -> dict[str, Any]:
    """The interpretation document's ``quality`` block (design.md §5).

    ``FEV1_grade``/``FVC_grade`` are the pre-bronchodilator grades (the post set's when there is
    no pre set), ``DLCO_grade`` the diffusion session grade; each is ``None`` when the part is
    absent. Added keys (allowed within ``/1``): ``spirometry`` with both sets' grades,
    ``volumes_repeatable``; ``notes`` gathers every part's notes.
    """
    main = pre or post
    notes: list[str] = []
    sets: dict[str, Any] = {}
    for name, part in (("pre", pre), ("post", post)):
        if part is not None:
            sets[name] = {"FEV1_grade": part.FEV1_grade, "FVC_grade": part.FVC_grade}
            notes.extend(part.notes)
    if diffusion is not None:
        notes.extend(diffusion.notes)
    if volumes is not None:
        notes.extend(volumes.notes)
    return {
        "FEV1_grade": main.FEV1_grade if main is not None else None,
        "FVC_grade": main.FVC_grade if main is not None else None,
        "DLCO_grade": diffusion.grade if diffusion is not None else None,
        "volumes_repeatable": volumes.repeatable if volumes is not None else None,
        "spirometry": sets,
        "notes": notes,
    }
