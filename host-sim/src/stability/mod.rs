//! Frequency-domain analysis of the automatic-power-control loop: rational
//! transfer functions ([`tf`]), gain and phase margins with python-control
//! semantics ([`mod@margins`]), the linearised diodestat loop at one operating
//! point ([`loop_model`]), Bode plots ([`bode`]), PI gain design over a
//! set of plant corners ([`design`]), and the loops of a simulated board at
//! its plant corners with a pass/fail gate ([`corners`]), the same corners
//! in the time domain on the nonlinear simulator ([`time_domain`]), and a
//! board's whole assessment with its report and findings ([`assessment`]).

pub mod assessment;
pub mod bode;
pub mod corners;
pub mod design;
pub mod loop_model;
pub mod margins;
pub mod tf;
pub mod time_domain;

pub use bode::{bode_data, bode_svg, margin_text, write_bode_svg, BodeData, BodeError, BodeLoop};
pub use corners::{
    analyse_corners, corner_loop, design_for_corners, gate, standard_corner_loops,
    standard_corners, CornerAnalysis, CornerDesignError, CornerError, CornerLoop, CornerOptions,
    GateFailure, GateReport, OperatingPoint, PlantCorner,
};
pub use design::{
    core_ki_per_tick, design_for_bandwidth, design_pi, CornerMargins, Design, DesignError,
    DesignSpec, Limit, Reference, BANDWIDTH_TOL, DESIGN_GM_DB, DESIGN_PM_DEG,
};
pub use loop_model::{
    closed_loop, closed_loop_step, closed_loop_step_front, closed_loop_step_front_with,
    loop_margins, open_loop, open_loop_with, pi_controller, plant, Discretisation, LoopParams,
    LoopParamsError,
};
pub use margins::{
    bandwidth_rad_s, crossings, margins, Crossings, GainCrossover, LoopTransfer, Margins,
    PhaseCrossover, PASS_GM_DB, PASS_PM_DEG,
};
pub use tf::{Complex, ContinuousTf, DiscreteTf, Poly};
