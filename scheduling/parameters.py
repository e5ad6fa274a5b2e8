"""Default constants for the capacitor physics in :mod:`scheduling.physics`.

Pure Python, no Django.  Every constant says where it comes from, using the
markers of ``docs/references.md`` (shared docs):

* **[V]** read in a published source;
* **[M]** from memory: confirm before citing it as a standard;
* **[C]** computed from a formula;
* **[CP]** common practice, no single source;
* **numerical** a guard or a solver setting, not a physical value.

Units are in the names (``_H`` hours, ``_C`` degC, ``_K`` kelvin or a
temperature difference, ``_EV`` electronvolt, ``_OHM``, ``_F``, ``_HZ``,
``_V``, ``_W_PER_CM2_K``).
"""

import scipy.constants

# --- Physical constants ----------------------------------------------------

#: Boltzmann constant [eV/K].  [V] CODATA via
#: ``scipy.constants.physical_constants['Boltzmann constant in eV/K']``;
#: exact since the 2019 SI redefinition (8.617333262e-5 eV/K).
BOLTZMANN_EV_PER_K = scipy.constants.physical_constants["Boltzmann constant in eV/K"][0]

#: 0 degC in kelvin [K].  [V] SI definition (``scipy.constants.zero_Celsius``).
ZERO_CELSIUS_K = scipy.constants.zero_Celsius

#: Absolute zero in degC.  Temperatures at or below it are rejected.
ABSOLUTE_ZERO_C = -ZERO_CELSIUS_K

# --- Temperature life laws -------------------------------------------------

#: Temperature step that halves life in the 10 K rule [K].  [V] a capacitor
#: manufacturer's primer: "for every rise in usage temperature by 10 degrees
#: centigrade, the service life is shortened to one half".
TEN_K_RULE_STEP_K = 10.0

#: Life law used when none is given: ``'10k'`` (the 10 K rule) or
#: ``'arrhenius'``.  [CP] the 10 K rule is what manufacturers' life
#: calculators use for aluminium electrolytics.
DEFAULT_LAW = "10k"

#: Activation energy that makes a single-Ea Arrhenius law halve life between
#: 95 and 105 degC, ``k*ln2*T1*T2/(T2 - T1)`` [eV].  [C] references.md §1.
#: Not a default for the Arrhenius law (it must be chosen explicitly): the
#: 10 K rule is not one Arrhenius law (0.745 eV at 75->85, 0.567 at 30->40).
TEN_K_EQUIVALENT_EA_EV = 0.8315

# --- Ripple self-heating ---------------------------------------------------

#: Heat-transfer coefficient from the can surface to the air [W/(cm^2 K)].
#: [M] application guides quote 1.5-2.5e-3 W/(cm^2 K); we take the low
#: (conservative: hotter core) end.  For scale, radiation alone gives about
#: 0.55e-3 W/(cm^2 K) at emissivity 0.9 and 300 K [C].
HEAT_TRANSFER_W_PER_CM2_K = 1.5e-3

#: Frequency at which data sheets state tan delta [Hz].  [V, data-sheet
#: convention] 120 Hz (100 Hz in some European series).
TAN_DELTA_FREQ_HZ = 120.0

# --- Drift with damage (D = 1 is end of life) ------------------------------

#: ESR at damage 1 as a multiple of the initial ESR.  [V, secondary]
#: IEC 60384-4 endurance limits as quoted in series data sheets (tan delta /
#: ESR up to 1.3-2x the initial limit) and the practical criterion "ESR about
#: twice rated" (public encyclopedia article); references.md §2.
ESR_RATIO_AT_END = 2.0

#: Fractional capacitance loss at damage 1.  [V, secondary] IEC 60384-4
#: endurance limits as quoted in series data sheets (+-15..20 %); [M] the
#: prognostics literature also uses -20 %.  references.md §2.
CAPACITANCE_LOSS_AT_END = 0.2

#: Smallest capacitance the linear drift law returns, as a fraction of the
#: initial value.  numerical: ``C0*(1 - 0.2*D)`` reaches zero at D = 5, and a
#: zero capacitance would divide by zero in the circuit formulas.  Far beyond
#: any requirement threshold, so it does not change any threshold found below
#: ``DAMAGE_MAX``.
CAPACITANCE_FLOOR_FRACTION = 1e-3

#: Damage threshold of a "general" role: the end-of-life limits themselves.
#: [CP] references.md §2 / design brief §5.
GENERAL_DAMAGE_THRESHOLD = 1.0

# --- Solvers ---------------------------------------------------------------

#: Upper end of the damage bracket searched for a requirement threshold, and
#: the cap of the damage integrated with ESR feedback.  numerical: at D = 20
#: the ESR has grown 2**20 (about a million) times; a threshold beyond it is
#: reported as ``inf`` ("never within the drift model").
DAMAGE_MAX = 20.0

#: Most steps of the threshold root search on [0, DAMAGE_MAX], and the width
#: of the damage bracket at which it stops.  numerical: 44 halvings alone
#: would reach 20 / 2**44 (about 1e-12); the regula falsi steps get there in
#: about a dozen.
BISECTION_ITERATIONS = 60
ROOT_TOLERANCE_DAMAGE = 1e-12

#: Fixed RK4 steps over one constant-ambient interval in
#: ``damage_with_esr_feedback``.  numerical: agrees with
#: ``scipy.integrate.solve_ivp`` to about 1e-10 relative for damage growth of
#: up to about 1.4 in one interval (scheduling/tests/test_physics.py); near
#: thermal runaway use more steps or shorter intervals.
RK4_STEPS = 200

# --- Circuits --------------------------------------------------------------

#: Weight of the flying (pump) capacitor's ESR in a charge-pump inverter's
#: output resistance.  [V] a classic CMOS switched-capacitor voltage converter
#: data sheet:
#: ``Ro = 2(23) + 1/(f_pump*C1) + 4*ESR_C1 + ESR_C2 ~= 46 + 20 + 5*ESR_C``;
#: its "5" is 4 + 1 for equal ESRs, not a rounding of the 4.
FLYING_ESR_FACTOR = 4.0

#: Peak charging current of a capacitor-input rectifier reservoir, as a
#: multiple of the DC load current.  [CP] short conduction angles give peaks
#: of about 4-10x the average; 5x is a middle value for mains supplies.
PEAK_TO_LOAD_CURRENT_RATIO = 5.0

#: Highest acceptable high-pass corner of an audio coupling capacitor [Hz].
#: [CP] the bottom of the audio band (design brief §5: "e.g. 20 Hz").
COUPLING_MAX_CORNER_HZ = 20.0

# --- Scatter ---------------------------------------------------------------

#: Weibull shape (beta) of wear-out scatter around the predicted damage.
#: [M] wear-out beta about 2-6 for electrolytic capacitors; 3 is mid-range.
#: No published beta for electrolytic wear-out has been confirmed yet
#: (references.md "Open").
WEIBULL_SHAPE = 3.0

#: Spread of a unit's true damage around the prediction: standard deviation
#: of the natural log of a multiplier shared by all the unit's positions.
#: Our assumption (no source): 0.4 is a factor of about 1.5 either way, for
#: what the records cannot tell (use before the unit joined the fleet is
#: assumed, storage follows the location's profile, part batches differ).
#: It is what lets "the unit works now" count as evidence (see
#: ``physics.unit_conditional_hazard``); 0 gives the plain Weibull series system.
FRAILTY_SIGMA = 0.4

#: Largest log-sd of the hazard multiplier (Weibull shape x FRAILTY_SIGMA)
#: the frailty integral is checked for.  numerical (scheduling/tests).
FRAILTY_HAZARD_SIGMA_MAX = 3.0
#: The frailty integral's trapezoid rule: half-width of the window around the
#: integrand's peak (in standard deviations of ln Y) and its points; a table of
#: ln H in [-30, 30] with this many points, read through a cubic spline.
#: numerical: agrees with ``scipy.integrate.quad`` to about 1e-8 relative.
FRAILTY_WINDOW = 12.0
FRAILTY_GRID_POINTS = 1201
FRAILTY_LN_HAZARD_MAX = 30.0
FRAILTY_TABLE_POINTS = 601
#: A frailty sigma shared by at most this many hazards is integrated directly
#: rather than tabulated (a unit's own sigma after bench readings).  numerical.
FRAILTY_DIRECT_MAX = 512

# --- Bench readings (findings) ----------------------------------------------

#: Error of an ESR reading as the log-sd of the measured/true ESR [-].  Our
#: assumption: an ESR meter of about +-5 % and a new part's ESR scattering
#: below the data sheet's maximum by some 15-20 % (from memory); 0.2 in log.
READING_ESR_LOG_SD = 0.2
#: Error of a capacitance reading as a fraction of the rated value [-].
#: Electrolytics are marked +-20 % (IEC 60062 tolerance code M, from memory);
#: taken as two standard deviations, so 0.10.
READING_CAPACITANCE_REL_SD = 0.10
#: Error of the pump pair's ESR inferred from a rail reading, as a log-sd
#: [-].  Our assumption: the load current and the switch resistance are known
#: to about +-30 %.
READING_RAIL_LOG_SD = 0.3
#: How far one position's ageing strays from its unit's shared multiplier, as
#: a log-sd [-] (batch, place in the case).  Our assumption, no source; it
#: keeps one precise reading from fixing the whole unit's frailty.
READING_PART_LOG_SD = 0.25
#: A read part's future rate is its predicted rate times measured / predicted
#: damage, clipped to this range [-].  Our choice: beyond a factor of four
#: either way a single reading is more likely a meter or data error (another
#: series fitted, a wrong rating) than a true rate.
RATE_FACTOR_MIN = 0.25
RATE_FACTOR_MAX = 4.0
#: Damage of a pump part taken as the scale of a new pair when solving a rail
#: reading (both predicted at zero) [-].  numerical.
PUMP_PAIR_DAMAGE_FLOOR = 1e-3

#: Leakage limit of the data-sheet convention: ``k * C[uF] * U[V]`` uA or the
#: floor, whichever is greater, after 2 min at 20 degC.  [V, data-sheet
#: convention] references.md §2.
LEAKAGE_LIMIT_UA_PER_UF_V = 0.01
LEAKAGE_LIMIT_FLOOR_UA = 3.0

# --- Plausibility of a part's figures (physics.plausibility) -----------------

#: Widest range of rated charge per can volume (capacitance x rated voltage
#: over the can's volume) a real aluminium electrolytic capacitor has
#: [uC/cm^3].  [M] series data sheets put general-purpose parts between about
#: 20 (0.1 uF 50 V in 5 x 11 mm) and 15,000 (low-voltage high-capacitance
#: cans); the bounds are about twenty and seven times beyond, to catch
#: figures wrong by orders of magnitude (1 pF typed for 1 uF), not poor parts.
CHARGE_DENSITY_MIN_UC_PER_CM3 = 1.0
CHARGE_DENSITY_MAX_UC_PER_CM3 = 1.0e5

#: Range of tan delta at 120 Hz an ESR may imply (``2 pi f C ESR``).  [M]
#: data sheets give tan delta of about 0.05-0.3 at 120 Hz; low-ESR parts
#: stated by their 100 kHz ESR come out near 0.01; the model refuses tan
#: delta of 5 or more (``fleet.models``).  The lower bound is a hundred
#: times below low-ESR parts.
TAN_DELTA_PLAUSIBLE_MIN = 1.0e-4
TAN_DELTA_PLAUSIBLE_MAX = 5.0

#: Largest core rise from ripple current a part could survive [K].  [V,
#: secondary] a manufacturer's application note: rated ripple current heats
#: the core by about 3.5-5 K (refs §4); [M] common electrolytes boil at
#: about 150-200 degC, so a rise of 100 K (twenty times the rated heating)
#: on top of any room puts the core there: the part would vent at once.
RIPPLE_RISE_PLAUSIBLE_MAX_K = 100.0

# --- Safety ----------------------------------------------------------------

#: Voltage treated as safe to touch after discharge [V d.c.].  [V] SELV per
#: IEC 60335-1 as quoted in IEC Electropedia: 60 V d.c. (references.md §7).
SAFE_VOLTAGE_V = 60.0

#: The discharge resistor the safety figures are worked out for [ohm].  [CP]
#: 10 kohm on insulated leads is a common bench choice for filter cans: at
#: 500 V it draws 50 mA (25 W peak, a pulse a 5 W wirewound part takes) and
#: brings 100 uF from 400 V to 60 V in about 2 s (references.md §7).
DISCHARGE_RESISTOR_OHM = 10e3

# --- Triage ------------------------------------------------------------------

#: What a failing position's role does to a hire, 0..1, weighting its share of
#: the hazard a hire adds.  Our assumption (no published source): a pump pair
#: losing the negative rail silences the unit (the hire is lost); a reservoir
#: brings hum or dropouts (the unit is usually pulled); decoupling, noise or
#: instability; a coupling capacitor loses the low end (degraded but usable);
#: timing and general parts drift.
ROLE_HIRE_IMPACT = {
    "pump_flying": 1.0, "pump_reservoir": 1.0, "supply_reservoir": 0.8, "supply_decoupling": 0.5,
    "signal_coupling": 0.4, "timing": 0.3, "general": 0.3,
}
#: Measure a part from this share of its damage limit on.  Our choice: past
#: about two thirds of the way the prediction's scatter (Weibull shape 3)
#: makes a reading worth more than the estimate.
MEASURE_SHARE = 0.7
