"""The method text of the HTML report: every equation with a short explanation and its source.

:func:`methods` picks the entries of one run: the core steps, then those of the optional
analyses (bootstrap intervals, sensitivity, population trend) that were run.
"""

from __future__ import annotations

from dataclasses import dataclass

from nutricap.science import population


@dataclass(frozen=True)
class Method:
    """One step of the method: its equation, a short explanation and its source."""

    title: str
    equation: str
    text: str
    source: str


METHODS = (
    Method(
        "Clip plots to forage per hectare",
        "B = 10 · m / A    [kg DM/ha]; stratum mean x̄ = Σx/n, SE = s/√n",
        "m is the oven-dry mass clipped in a frame [g], A the frame area [m²]; 1 g/m² = "
        "10 kg/ha. A forage class missing from a plot counts as 0 on that plot.",
        "SI unit definitions; sample mean and standard error (common practice).",
    ),
    Method(
        "Available forage",
        "a(unit, class) = Σ_strata accessible ha × mean kg/ha    [kg DM]",
        "Accessible hectares come from overlaying the strata on the units in the area CRS.",
        "Stratified estimation (common practice).",
    ),
    Method(
        "Basal metabolism",
        "BMR = 70 · W^0.75    [kcal/day], W in kg",
        "W^0.75 is metabolic body size.",
        "Kleiber, M. 1961. The Fire of Life. Wiley, New York.",
    ),
    Method(
        "Energy requirement by nutritional state",
        "ME = m · BMR;  DE = ME / 0.82    [kcal/day]",
        "m is the multiple of basal metabolism for the state and season (parameter table "
        "below). 0.82 converts metabolizable to digestible energy for ruminants on forage.",
        "Multipliers: National Research Council 2007, Nutrient Requirements of Small Ruminants "
        "(cervid maintenance, winter and summer) and the studies each row of the parameter "
        "table names; a cervid default. ME = 0.82 · DE: National Research Council 1996, "
        "Nutrient Requirements of Beef Cattle, 7th rev. ed., p. 126.",
    ),
    Method(
        "Intake, protein requirement and minimum diet quality",
        "I = i · W^0.75 / 1000 [kg DM/day];  R_DP = p · W^0.75 [g/day];\n"
        "q_DE = DE / (1000 · I) [kcal/g];  q_DP = 100 · R_DP / (1000 · I) [%]",
        "The diet must supply the requirement within the intake limit. The thresholds are "
        "those of the target class in the target state, so that the diet keeps those animals "
        "in the chosen condition. Every animal-day of the tables is a day of the herd's "
        "share-weighted average animal: an NCC or allowable-use animal-day eats its intake I, "
        "an ECC animal-day supplies its maintenance energy R_maint. Intake is held fixed "
        "whatever the diet quality, an assumption of the method (intake falls on poor diets).",
        "Hobbs, N.T. & Swift, D.M. 1985. J. Wildl. Manage. 49:814–822; i and p from memory "
        "or common practice (parameter table).",
    ),
    Method(
        "Digestible energy of forage",
        "DE = GE · DMD / 100    [kcal/g DM]",
        "Used when a forage class gives dry-matter digestibility instead of DE; GE defaults "
        "to 4.4 kcal/g.",
        "Robbins, C.T. 1993. Wildlife Feeding and Nutrition (from memory).",
    ),
    Method(
        "Digestible protein of forage",
        "DP = −3.87 + 0.9283 · CP − 11.82 · BSA    [% DM]",
        "CP is crude protein [% DM]; BSA the tannins' protein precipitation [mg/mg]. Not "
        "clipped at 0: the intercept is metabolic faecal protein lost per unit eaten, so "
        "forage below about 4.2 % CP has negative DP and a diet's DP is the mass-weighted mean "
        "of its items' linear values.",
        "Robbins, C.T., Hanley, T.A., Hagerman, A.E. et al. 1987. Ecology 68:98–107 "
        "(abstract read); −3.87 + 0.9283 · CP read in a secondary table citing Hanley et al. "
        "1992, Ecology 73:537–541; BSA slope from memory.",
    ),
    Method(
        "Nutritional carrying capacity (one nutrient)",
        "maximise Σ x_i  subject to  0 ≤ x_i ≤ c_i a_i,  Σ x_i (q_i − T) ≥ 0;\n"
        "NCC [animal-days] = Σ x_i / I;  NCC [animals] = animal-days / D",
        "A linear programme solved exactly by sorting forage by quality and accumulating "
        "until the diet's DE falls to the threshold T. c_i is the allowable use when NCC is "
        "capped at allowable use, else 1; D is the season length. The marginal forage class "
        "is the one eaten in part, x_k = Σ_(j before k) (q_j − T) c_j a_j / (T − q_k), so "
        "that the diet's DE equals T.",
        "Hobbs, N.T. & Swift, D.M. 1985. Estimates of habitat carrying capacity incorporating "
        "explicit nutritional constraints. J. Wildl. Manage. 49:814–822.",
    ),
    Method(
        "Two nutrients at once",
        "… and Σ x_i (p_i − P) ≥ 0",
        "Energy and protein constraints together, solved exactly from the vertices of the "
        "two-multiplier dual, or by scipy.optimize.linprog (HiGHS) when that cannot certify "
        "the optimum. The limiting factor names the binding constraint(s).",
        "Hanley, T.A. & Rogers, J.J. 1989. Estimating carrying capacity with simultaneous "
        "nutritional constraints. USDA Forest Service Research Note PNW-RN-485.",
    ),
    Method(
        "Ecological carrying capacity (forage-quantity ceiling)",
        "ECC [animal-days] = 1000 · Σ a_i q_i / R_maint",
        "All forage counts, whatever its quality, and no allowable-use cap applies: the "
        "ceiling the herd would grow to. R_maint is the herd's average animal's DE requirement "
        "at maintenance in the same season [kcal/day]. NCC ≤ ECC whenever T · I · 1000 ≥ "
        "R_maint, which the packaged requirement table guarantees for every state and season.",
        "Hobbs, N.T. & Swift, D.M. 1985. J. Wildl. Manage. 49:814–822.",
    ),
    Method(
        "Capacity at allowable use",
        "AUC [animal-days] = Σ u_i a_i / I",
        "u_i is each forage class's allowable use (the fraction that may be removed).",
        "Holechek, J.L. 1988. An approach for setting the stocking rate. Rangelands 10:10–14.",
    ),
    Method(
        "Animal units",
        "AUE = (W / 453.6)^0.75 [AU];  AUM = forage [kg DM] / 353.8",
        "An AUM is a quantity of forage: one animal unit (a 1000-lb, 453.6 kg cow) eats 26 lb "
        "(11.8 kg) oven-dry forage a day, 780 lb (353.8 kg) in a 30-day month. ncc_aum is the "
        "forage eaten at NCC, allowable_use_aum the forage usable at allowable use, each over "
        "353.8 kg. AUE rates an animal by metabolic weight, the AUM columns count forage: NCC "
        "× AUE × months equals ncc_aum only when the herd eats as much per unit of metabolic "
        "weight as the animal unit does (11.8 kg a day per 453.6^0.75).",
        "USDA NRCS National Range and Pasture Handbook (attribution from memory; values read "
        "in secondary sources); Society for Range Management 1998 glossary (30-day AUM).",
    ),
    Method(
        "Density",
        "NCC per km² = NCC [animals] / (area [ha] / 100)",
        "1 km² = 100 ha.",
        "SI unit definitions.",
    ),
)


BOOTSTRAP_METHOD = Method(
    "Intervals: stratified bootstrap over plots",
    "interval = (100·(1−level)/2, 100·(1+level)/2) percentiles of the replicate capacities",
    "Plots are resampled with replacement within each stratum, the stratum means recomputed "
    "and every capacity solved again for each replicate.",
    "Efron, B. & Tibshirani, R.J. 1993. An Introduction to the Bootstrap. Chapman & Hall "
    "(percentile intervals; stratified resampling, from memory).",
)

SENSITIVITY_METHOD = Method(
    "Sensitivity",
    "Δ_low = NCC(x·(1−δ)) − NCC(x);  Δ_high = NCC(x·(1+δ)) − NCC(x)    [animals]",
    "Each input group is moved down and up by the fraction δ, one at a time, and total NCC "
    "is solved again; inputs are ranked by |Δ_high − Δ_low|.",
    "One-at-a-time perturbation (common practice).",
)

TREND_METHOD = Method(
    "Population trend",
    "λ = N(t+1)/N(t);  r = ln λ;  MSY level = K/2;  MSY = r_max·K/4",
    population.LOGISTIC_METHOD + ".",
    "The logistic model and maximum sustained yield (textbook population ecology); "
    "May, R.M. 1974. Science 186:645–647 (discrete logistic, from memory).",
)


DIET_LIMITS_METHOD = Method(
    "Diet-composition limits",
    "x_i ≤ s_i · X;    m_g · X ≤ Σ_(i in g) x_i ≤ M_g · X,    X = Σ_j x_j",
    "Added to the linear programme: no forage class above its largest diet share s_i, each "
    "group (e.g. a growth form) between its smallest and largest share of the diet. A unit "
    "whose optimum without the limits already meets them keeps it; the others are solved "
    "again with them, each answer certified by LP duality or found by "
    "scipy.optimize.linprog (HiGHS).",
    "Diet-composition constraints of diet linear programmes (common practice).",
)
USE_METHOD = Method(
    "Current use and overuse",
    "demand = N · I · D;    eaten_c = demand · p_c u_c a_c / Σ_k p_k u_k a_k;\n"
    "use_c = eaten_c / a_c;    animals at the limit = N · min_(key c) (u_c / use_c)",
    "N current animals, p_c the class's preference, u_c its allowable use, a_c its available "
    "forage. Overuse: a key class used beyond its allowable use; the advisory reduction is N "
    "less the animals at the limit. With other herbivores, use is theirs and the herd's "
    "together, against each class's own allowable use.",
    "Allocation in proportion to usable forage: our stated rule (docs/methods.md); "
    "allowable use as the share that may be removed: Holechek, J.L. 1988. Rangelands "
    "10:10–14.",
)
OTHER_HERBIVORES_METHOD = Method(
    "Other herbivores on the shared range",
    "taken_i = h_i · min(1, λ p_i),  Σ_i taken_i = min(D_h, Σ h_i),  h_i = u_i a_i − T_i;\n"
    "forage left a'_i = a_i − T_i,  use cap c'_i = (u_i a_i − T_i) / (a_i − T_i)",
    "Each herd's demand D_h (animals × intake × days, or AUMs × 353.8 kg) falls on the forage "
    "classes in proportion to preference × headroom h_i, none beyond its allowable use; "
    "herds grazing before the season go first. The target species' capacities are solved "
    "on what they leave, so all herbivores together stay within allowable use. The "
    "exchange rate is the NCC lost per AUM a herd takes (leave one herd out).",
    "Our stated allocation rule (docs/methods.md); AUM of 780 lb: Society for Range "
    "Management 1998 glossary.",
)
TREATMENT_METHOD = Method(
    "Treatment responses",
    "a_c(t) = a_c · m_c(t − t0);    q_c(t) = q_c + Δq_c(t − t0);    CP_c(t) = CP_c + ΔCP_c(t − t0)",
    "m, Δq and ΔCP are the response table's biomass multiplier and quality shifts for the "
    "treatment, interpolated linearly between its listed years since treatment (the first "
    "value before the first year; no effect after the last). Each year of the scenario is "
    "solved again and set beside the baseline.",
    "Response tables: the user's (their sources in the table); linear interpolation "
    "(common practice).",
)


SNOW_METHOD = Method(
    "Snow burial of forage (raster path)",
    "f_c = clip(1 − d / h_c, 0, 1)    or, all-or-none,    f_c = 1 if d < h_c else 0",
    "d is the cell's snow depth [cm] and h_c the height of forage class c [cm]; the first form "
    "spreads a class's forage evenly over its height, the second keeps all of it until it is "
    "buried. Forage left = standing forage × f_c.",
    "Common practice (the even vertical spread is an assumption; docs/rasters.md).",
)
REDUCTION_METHOD = Method(
    "Slope and distance-to-water reductions (raster path)",
    "forage left = forage · (1 − r_slope) · (1 − r_water)",
    "r is the share of grazing capacity removed in the cell's class of slope [%] and of "
    "distance to water [m], from step tables (shown with their sources in the raster section).",
    "Holechek, J.L. 1988. Rangelands 10:10–14 (classes partly read in a secondary source; "
    "each row's source is in the table).",
)
MIN_DENSITY_METHOD = Method(
    "Minimum forage density (raster path)",
    "m = 1 if Σ_c g_c · f_c ≥ D_min, else 0    [kg DM/ha]",
    "A cell with less forage above the snow than D_min is not foraged at all.",
    "Common practice.",
)
CALIBRATION_METHOD = Method(
    "Biomass from an index raster (calibrated raster path)",
    "B = a + b · x  (linear);    B = s · e^(a + b·x),  s = mean(e^residual)  (log-linear)",
    "Least squares of the calibration plots' group biomass B [kg/ha] on the index x at each "
    "plot; the log-linear model is back-transformed with the smearing factor s; 'best' takes "
    "the lower AIC on the kg/ha scale. The index beyond the plots' range by more than the "
    "margin is clamped or, when asked, extrapolated with a warning.",
    "Duan, N. 1983. J. Am. Stat. Assoc. 78:605–610; Akaike, H. 1978. J. R. Stat. Soc. D "
    "27:217–235 (AIC of ln B turned to the kg/ha scale by the Jacobian).",
)
MODEL_BOOTSTRAP_METHOD = Method(
    "Model error in the bootstrap (calibrated raster path)",
    "a*, b* refitted to calibration plots drawn with replacement;  forage* = a*·S0 + b*·S1",
    "S0 = Σ forage left / prediction and S1 = Σ forage left · x / prediction per unit × stratum "
    "come from the raster pass, so a refit needs no second pass (linear models, exact); "
    "log-linear models are evaluated on 8 index bins (error bound in docs/methods.md).",
    "Efron, B. & Tibshirani, R.J. 1993. An Introduction to the Bootstrap, ch. 9 (pairs "
    "bootstrap; from memory).",
)


def raster_methods(
    *, snow: bool, reductions: bool, min_density: bool, calibrated: bool, model_bootstrap: bool
) -> tuple[Method, ...]:
    """The method entries of the raster path's steps that a run used."""
    used = (
        (calibrated, CALIBRATION_METHOD),
        (snow, SNOW_METHOD),
        (reductions, REDUCTION_METHOD),
        (min_density, MIN_DENSITY_METHOD),
        (model_bootstrap, MODEL_BOOTSTRAP_METHOD),
    )
    return tuple(method for flag, method in used if flag)


GRID_AVAILABLE_METHOD = Method(
    "Available forage (raster path)",
    "a(unit, stratum, class) = Σ_cells in unit and stratum  forage left [kg/ha] × cell area [ha]",
    "Each cell belongs to the unit and stratum holding its centre; its forage of a class is "
    "the class's raster (or calibrated, or plot-mean) biomass after the availability rules.",
    "Sums over grid cells (common practice for zonal totals).",
)


def methods(
    *,
    intervals: bool,
    sensitivity: bool,
    trend: bool,
    grid: bool = False,
    diet_limits: bool = False,
    other_herbivores: bool = False,
    current_use: bool = False,
    scenarios: bool = False,
) -> tuple[Method, ...]:
    """The method entries of this run: the core (with the raster path's available forage
    when ``grid``), then those of the optional steps and analyses that were run."""
    core = tuple(
        GRID_AVAILABLE_METHOD if grid and method.title == "Available forage" else method
        for method in METHODS
    )
    optional = (
        (diet_limits, DIET_LIMITS_METHOD),
        (other_herbivores, OTHER_HERBIVORES_METHOD),
        (current_use, USE_METHOD),
        (scenarios, TREATMENT_METHOD),
        (intervals, BOOTSTRAP_METHOD),
        (sensitivity, SENSITIVITY_METHOD),
        (trend, TREND_METHOD),
    )
    return core + tuple(method for used, method in optional if used)
