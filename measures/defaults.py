"""Every default parameter of the scoring functions, as plain data.

Kept apart from the numerics so that the web process can build and store the
default recipe (``service.pipeline.recipes``) without importing numba, scipy or
open3d: importing this module loads nothing but the standard library. The
summaries import their defaults from here; ``tests/test_defaults.py`` checks
that ``HEIGHTMAP_DEFAULTS`` matches the keyword defaults of
:func:`measures.terrain.pointcloud.points_to_heightmap`.
"""

from __future__ import annotations

from typing import Any

__all__ = [
    "FLAGGED_WARN_FRACTION",
    "HEIGHTMAP_DEFAULTS",
    "MOVEMENT_DEFAULTS",
    "SPIKE_WINDOW_S",
    "TERRAIN_DEFAULTS",
]

#: Running-median span of the spike detector: 5 frames at 300 Hz (handles
#: spikes of up to 2 frames there), scaled with the frame rate elsewhere.
SPIKE_WINDOW_S = 5.0 / 300.0
#: Flagged-frame fraction above which preprocessing warns (our choice: a clean
#: capture flags well under 1 %; a few percent means spikes, swaps or a
#: detector that does not fit the data).
FLAGGED_WARN_FRACTION = 0.02

#: Every parameter of :func:`movement_summary` with its default.
MOVEMENT_DEFAULTS: dict[str, Any] = {
    # preprocessing (measures.movement.kinematics)
    "max_gap_s": 0.05,
    "cutoff_hz": None,  # None: Winter's residual analysis per marker and axis
    "filter_order": 2,
    "remove_spikes": True,
    "spike_threshold": 8.0,
    "spike_window_s": SPIKE_WINDOW_S,  # 5 frames at 300 Hz, 3 at 30 Hz
    "flagged_warn_fraction": FLAGGED_WARN_FRACTION,
    "min_segment_s": 0.1,
    # body frame (measures.movement.bodyframe)
    "up": (0.0, 0.0, 1.0),
    "up_axis": None,  # "x", "y", "z", "-x", ...: overrides ``up``
    "heading": "auto",  # "axis", "velocity" (upright bodies) or "auto"
    "heading_window_s": 1.0,
    "treadmill_speed_m_s": None,
    # contacts and strides (measures.movement.gait)
    "reference_limb": "LH",
    "contact_low_fraction": 0.2,
    "contact_high_fraction": 0.4,
    "contact_velocity_fraction": 0.1,
    "min_phase_s": 0.01,
    "contact_min_lift_m": 1e-3,  # 5 x the 0.2 mm capture resolution (common practice)
    "contact_method": "speed",  # ground speed: robust where stones lift a planted foot
    "contact_speed_low_fraction": 0.1,
    "contact_speed_high_fraction": 0.2,
    # step-cycle classes
    "cycle_samples": 101,
    "cycle_k_max": 6,
    "cycle_min_silhouette": 0.5,
    "seed": 0,
    # analysis state
    "analysis_state": "whole_body",  # or "single_foot"
    "ssa_window_s": None,  # None: one mean stride period (0.5 s without strides)
    "ssa_max_lags": 32,
    "ssa_max_channels": 8,
    "ssa_variance_fraction": 0.9,
    "ssa_max_components": 6,
    "symbol_channels": 2,
    # single-foot analysis signal (analysis_state="single_foot")
    "signal_limb": None,  # None: the reference limb
    "signal_axis": "z",  # body frame: x forward, y left, z up (foot height)
    # embedding
    "embedding_delay_samples": None,  # samples at the frame rate; None: from delay_method
    "delay_method": "ami",  # "ami" (first AMI minimum) or "quarter_stride"
    "embedding_dimension": None,  # None: from dimension_method
    "dimension_method": "fnn",  # "fnn" (Kennel et al. 1992) or "cao" (Cao 1997)
    "ami_bins": 32,
    "max_delay_s": 0.5,
    "max_dimension": 8,
    # recurrence quantification
    "rqa_recurrence_rate": 0.05,
    "rqa_theiler_samples": None,  # None: the (decimated) delay
    "rqa_lmin": 2,
    "rqa_vmin": 2,
    "rqa_metric": "euclidean",
    "rqa_max_points": 180_000,  # 10 minutes at 300 Hz at full rate
    "plot_max_size": 256,
    "plot_max_points": 2000,
    # ordinal patterns (complexity-entropy plane)
    "ordinal_order": 4,
    "ordinal_delay_samples": None,  # None: the delay
    # symbolic dynamics
    "symbol_order": 2,  # ordinal order per channel (2: up/down)
    "symbols_per_delay": 4,  # symbol readings per decorrelation delay (16 per stride)
    "entropy_method": "block",
    # C_mu at >= this share of log2(distinct L-histories), from a machine that is not
    # periodic, is set by the history length: withheld (NaN), the lower bound in the note
    "causal_ceiling_fraction": 0.99,
    # sample entropy on the coarse series
    "sampen_m": 2,
    "sampen_r": 0.2,
    # surrogates and interlimb coordination
    "n_surrogates": 19,  # 19: smallest one-sided p 0.05
    "surrogate_max_points": 2500,  # exact RQA threshold up to ~2,800 points
    "surrogate_max_iter": 50,  # IAAFT iterations per surrogate
    "interlimb_max_points": 8000,
}

# Every parameter terrain_summary uses, with its default. Plain values only,
# so the dict can be stored as a versioned analysis profile (JSON).
TERRAIN_DEFAULTS: dict[str, Any] = {
    "detrend": "plane",  # levelling before every measure ("plane" or "mean")
    "acf_threshold": 0.2,  # s for Sal and Str (ISO 25178-2 default)
    "slope_bin_deg": 1.0,  # fixed slope-histogram bin width, 0..90 degrees
    "aspect_bin_deg": 10.0,  # fixed aspect-histogram bin width, 0..360 degrees
    "slope_floor_deg": 2.0,  # aspect counted only where the slope exceeds this
    "psd_bins_per_decade": 10,
    "hurst_methods": ["psd", "variogram", "madogram", "boxcount"],
    # "common": every Hurst estimator on one band (the arena's band_m when given,
    # else 4 cells to an eighth of the shorter side); "auto": each method's own
    # default (the PSD's self-affine band search, the lag and box defaults).
    "hurst_band": "common",
    "min_valid_fraction": 0.5,  # below: no spectral or Hurst estimate (NaN, noted)
    "ordinal_order": [2, 2],  # 2-D ordinal patch (Ribeiro et al. 2012)
    # "random": equal heights ordered by a seeded random key (insensitive to
    # quantisation); "stable": the earlier cell ranks lower (order of appearance).
    "ordinal_ties": "random",
    "quantile_bins": 4,  # symbols for the 2-D entropy density and the two-part code
    "max_neighbourhood": None,  # None: the largest the field supports
    "surrogate_scores": [
        "permutation_entropy_2d",
        "js_complexity_2d",
        "entropy_density_2d_bits",
        "excess_entropy_2d_bits",
        "effective_complexity_2d_bits",
        "total_information_2d_bits_per_site",
    ],
    "n_surrogates": 19,
    "surrogate_seed": 20261201,
    # The ordinal scores' surrogates use the whole field (fused kernel); the
    # symbol-field scores' z-scores use the central tile of at most this many
    # cells, value and surrogates alike (noted when the tile is smaller).
    "surrogate_tile_cells": 256 * 256,
    "thumbnail_px": 256,  # longer side of the hillshade thumbnail
    "hillshade_azimuth_deg": 135.0,
    "hillshade_altitude_deg": 45.0,
}


#: Keyword defaults of ``points_to_heightmap`` (point cloud -> levelled grid),
#: stored in the recipe's ``heightmap`` section.
HEIGHTMAP_DEFAULTS: dict[str, Any] = {
    "dx_m": None,  # None: from the cloud's own point spacing (heightmap_dx_m)
    "outlier_method": "cell",
    "outlier_neighbours": 20,
    "outlier_std": 2.0,
    "outlier_cell_sigmas": 4.0,
    "voxel_m": None,
    "plane": "ransac",
    "plane_threshold_m": None,
    "crop": None,
    "fill_holes": True,
    "seed": 0,
    "max_points_for_fit": 200_000,
    "pit_sigmas": 5.0,
    "memory_cap_bytes": None,
}
