//! goalsmith-core: the pure computation behind goalsmith.
//!
//! Geometry in pixel coordinates (x right, y down, the centre of the top-left pixel at (0, 0)),
//! camera models, exact distance transforms, rigid fits, the cost of candidate futures against a
//! goal, point tracking through a demonstration (pyramidal Lucas–Kanade), reward inference from
//! demonstrations (maximum-entropy inverse RL on a grid), and the NPY array
//! format. Nothing here knows about HTTP, databases or async runtimes;
//! the crate boundary keeps it that way.
#![deny(missing_docs)]

pub mod bench;
pub mod camera;
pub mod canonical;
pub mod cost;
pub mod distance;
pub mod fuzzing;
pub mod geometry;
pub mod goal;
pub mod irl;
pub mod names;
pub mod npy;
pub mod rigid;
pub mod rng;
pub mod track;
