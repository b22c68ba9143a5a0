//! The numerical core: numbers in, numbers out. No I/O, HTTP, database or async
//! types live here; the command line and the service are thin shells around it.
//!
//! Flow: validated [`slice::Slice`]s -> [`smile`] fit per expiry -> [`replication`]
//! of variance, gamma and leverage swaps -> [`term`] structure and forward
//! variance -> [`calibrate`] an affine forward-variance model ([`models`]) to the
//! leverage swaps; [`uncertainty`] puts standard errors on the levels.
//! [`analysis::analyze`] runs the whole chain; [`seasoned_swaps`] values seasoned
//! swap positions on its result, with [`realized`] variance from closes.

pub mod analysis;
pub mod black;
pub mod calibrate;
pub mod models;
pub mod numerics;
pub mod observations;
pub mod realized;
pub mod replication;
pub mod seasoned_swaps;
pub mod slice;
pub mod smile;
pub mod special;
pub mod tenors;
pub mod term;
pub mod tolerances;
pub mod uncertainty;
