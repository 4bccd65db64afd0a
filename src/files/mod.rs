//! Files as a command touches them: opening only regular files (a FIFO or a device never blocks
//! a read), checking that no path a command writes is one it reads or writes twice, and removing
//! the temporaries of unfinished writes when the process is interrupted.

pub mod access;
pub mod open;
pub mod temps;

pub use access::FileAccess;
pub use open::open_regular;
