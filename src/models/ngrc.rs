//! Next-generation reservoir computing.
