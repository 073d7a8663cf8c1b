"""Parameters of the invented demo scenario: grids, the invented plant's niche, its invented
relatives, the sampling effort, the invented climate, the three invented climate models and the
slices (all invented; physical constants with their sources)."""

from __future__ import annotations

#: Default seed of the committed demo files.
DEFAULT_SEED = 20261201
#: Fine grid extent (lon_min, lon_max, lat_min, lat_max), degrees.
FINE_EXTENT = (-40.0, -20.0, 40.0, 55.0)
#: Coarse climate-model grid extent, degrees (1 degree cells).
MODEL_EXTENT = (-45.0, -15.0, 35.0, 60.0)
MODEL_RESOLUTION = 1.0
ICE_RESOLUTION = 0.5

#: Invented species name (invented genus).
SPECIES = "Nivalia demonstrata"

#: Standard-atmosphere lapse rate below 11 km, K per m (ICAO Doc 7488, ISO 2533:1975).
LAPSE_RATE_K_PER_M = 0.0065
#: Density of liquid water used to turn a mass flux into a depth, kg m-3 (common practice).
WATER_DENSITY = 1000.0
SECONDS_PER_DAY = 86400.0
#: Sea-level drop at 21 ka used by the scenario, m (an invented round value in the range of
#: published estimates, e.g. about -134 m in Lambeck et al. 2014, PNAS 111:15296).
SEA_LEVEL_21KA = -120.0
#: Approximate length of one degree of latitude, km (spherical Earth, R = 6371 km).
KM_PER_DEGREE = 111.195

#: Niche of the invented plant (in bioclimatic terms computed from the monthly fields):
#: Gaussian in the mean temperature of the warmest quarter, logistic in annual precipitation.
NICHE = {
    "bio10_optimum_degC": 8.5,
    "bio10_sd_degC": 2.5,
    "bio12_midpoint_mm": 700.0,
    "bio12_scale_mm": 60.0,
    "presence_threshold": 0.5,
}

#: Invented related species (same invented genus) for a target-group background: their own
#: niches (optimum and SD of bio10 in degC, logistic midpoint of bio12 in mm) and record counts.
#: Sampled with the same effort as the focal species, so that their records share its bias.
TARGET_GROUP = {
    "Nivalia exempli": {"bio10_optimum_degC": 6.0, "bio10_sd_degC": 2.5,
                        "bio12_midpoint_mm": 600.0, "n": 300},
    "Nivalia fictiva": {"bio10_optimum_degC": 10.5, "bio10_sd_degC": 3.0,
                        "bio12_midpoint_mm": 800.0, "n": 300},
    "Nivalia simulata": {"bio10_optimum_degC": 12.5, "bio10_sd_degC": 2.5,
                         "bio12_midpoint_mm": 500.0, "n": 300},
    "Nivalia probata": {"bio10_optimum_degC": 14.5, "bio10_sd_degC": 3.0,
                        "bio12_midpoint_mm": 900.0, "n": 300},
}

#: Relative sampling effort of the occurrence records: base + coast * exp(-d/coast_km)
#: + lowland * exp(-z/lowland_m), times 1 + (55 - lat)/south_deg (more records in the south).
EFFORT = {"base": 0.3, "coast": 1.0, "coast_km": 25.0, "lowland": 0.6, "lowland_m": 400.0,
          "south_deg": 15.0}

#: Invented sea-level climate of the truth.
CLIMATE = {
    "t_sea_40N_degC": 15.0,
    "t_lat_gradient_K_per_deg": 0.75,
}

#: Model biases against the invented truth (baseline runs).
MODELS: dict[str, dict] = {
    "alder": {"calendar": "noleap", "lat_descending": False,
              "dT": 1.2, "dT_per_deg_lat": 0.02, "dtr": 0.4, "pr_factor": 1.10,
              "pr_per_deg_lon": 0.004},
    "birch": {"calendar": "noleap", "lat_descending": False,
              "dT": -0.8, "dT_per_deg_lat": -0.03, "dtr": -0.3, "pr_factor": 0.85,
              "pr_per_deg_lon": -0.003},
    "cedar": {"calendar": "360_day", "lat_descending": True,
              "dT": 0.3, "dT_per_deg_lat": 0.08, "dtr": 0.8, "pr_factor": 1.00,
              "pr_per_deg_lon": 0.006},
}

#: Slices: label -> (scenario, period, year CE, age BP or None, first year, last year of the
#: nominal climatology, per-model change). Change: ``dT`` domain-mean warming (K),
#: ``summer`` seasonal amplitude (K, + in July), ``pr`` annual factor, ``pr_summer`` extra
#: summer factor.
SLICES: dict[str, dict] = {
    # glacial cooling much stronger towards the ice in the north than in the oceanic south,
    # and weaker in summer than in winter
    "21ka": {"scenario": "past", "period": "21ka", "age_bp": 21000, "years": (1, 30),
             "lat_gradient": 0.10, "elevation_gradient": 0.0,
             "change": {"alder": {"dT": -6.2, "summer": 1.0, "pr": 0.65, "pr_summer": 0.0},
                        "birch": {"dT": -5.2, "summer": 0.8, "pr": 0.75, "pr_summer": 0.0},
                        "cedar": {"dT": -5.7, "summer": 0.9, "pr": 0.70, "pr_summer": 0.0}}},
    "6ka": {"scenario": "past", "period": "6ka", "age_bp": 6000, "years": (1, 30),
            "change": {"alder": {"dT": 0.1, "summer": 0.8, "pr": 1.02, "pr_summer": -0.03},
                       "birch": {"dT": 0.0, "summer": 0.6, "pr": 1.04, "pr_summer": -0.02},
                       "cedar": {"dT": 0.2, "summer": 1.0, "pr": 1.00, "pr_summer": -0.05}}},
    "low-forcing_2041-2060": {
        "scenario": "low-forcing", "period": "2041-2060", "age_bp": None, "years": (2041, 2060),
        "change": {"alder": {"dT": 1.5, "summer": 0.2, "pr": 1.02, "pr_summer": -0.04},
                   "birch": {"dT": 1.7, "summer": 0.3, "pr": 0.99, "pr_summer": -0.06},
                   "cedar": {"dT": 1.3, "summer": 0.1, "pr": 1.03, "pr_summer": -0.03}}},
    "low-forcing_2081-2100": {
        "scenario": "low-forcing", "period": "2081-2100", "age_bp": None, "years": (2081, 2100),
        "change": {"alder": {"dT": 2.1, "summer": 0.3, "pr": 1.03, "pr_summer": -0.06},
                   "birch": {"dT": 2.4, "summer": 0.4, "pr": 0.98, "pr_summer": -0.08},
                   "cedar": {"dT": 1.9, "summer": 0.2, "pr": 1.04, "pr_summer": -0.05}}},
    "high-forcing_2041-2060": {
        "scenario": "high-forcing", "period": "2041-2060", "age_bp": None, "years": (2041, 2060),
        "change": {"alder": {"dT": 2.1, "summer": 0.3, "pr": 1.01, "pr_summer": -0.07},
                   "birch": {"dT": 2.3, "summer": 0.4, "pr": 0.97, "pr_summer": -0.09},
                   "cedar": {"dT": 1.9, "summer": 0.2, "pr": 1.02, "pr_summer": -0.06}}},
    "high-forcing_2081-2100": {
        "scenario": "high-forcing", "period": "2081-2100", "age_bp": None, "years": (2081, 2100),
        "change": {"alder": {"dT": 4.2, "summer": 0.7, "pr": 1.00, "pr_summer": -0.14},
                   "birch": {"dT": 4.8, "summer": 0.9, "pr": 0.94, "pr_summer": -0.18},
                   "cedar": {"dT": 3.7, "summer": 0.5, "pr": 1.03, "pr_summer": -0.12}}},
}

#: The invented host plant of the demo (a required partner): present on land below this
#: elevation, m (invented).
HOST_MAX_ELEVATION_M = 1400.0
