//! Thermodynamic core: component data, enthalpy paths, vapour pressure and bubble points, the
//! steady enthalpy balance with its inversions, the reconciliation of an effluent analyzer with
//! the stoichiometry, and uncertainty propagation.
//!
//! Everything here is pure computation on SI values (K, mol/s, W, J/mol, Pa, g/mol): no I/O,
//! no clock. The `calc` command and the service both build a [`balance::System`] once and call
//! [`balance::System::solve`] per case or per interval.

pub mod balance;
pub mod component;
pub mod enthalpy;
pub mod reconcile;
pub mod solver;
pub mod uncertainty;
pub mod vapor;

pub use balance::{
    Basis, Effluent, FeedInput, Flag, FlowValue, Inputs, Outcome, PathChoice, Reaction, SolveError, System,
    SystemError, Unknown,
};
pub use component::{Component, ComponentSpec, Library};
pub use enthalpy::{EnthalpyPath, PureEnthalpy, T_REF};
