"""Invented demo study for gaitscape: synthetic arena ground and a synthetic quadruped.

Nothing here is real data. ``build_scenario(out_dir)`` writes scans (PLY,
NPY heightmaps), trials (C3D, CSV) and JSON sidecars, and returns a manifest.
"""

from demo_arena.ground import TRAYS, TraySpec, make_tray, self_affine_surface
from demo_arena.scenario import SUBJECTS, DemoFile, Scenario, build_scenario, scan_points
from demo_arena.walker import FEET, MARKERS, SubjectSpec, WalkRecording, walk_over

__all__ = [
    "FEET",
    "MARKERS",
    "SUBJECTS",
    "TRAYS",
    "DemoFile",
    "Scenario",
    "SubjectSpec",
    "TraySpec",
    "WalkRecording",
    "build_scenario",
    "make_tray",
    "scan_points",
    "self_affine_surface",
    "walk_over",
]
