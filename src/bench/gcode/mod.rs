//! G-code in three layers: a pure line [`codec`], a pure [`controller`] state machine that
//! takes the current time as an argument, and one thin async [`link`] over any
//! `AsyncRead + AsyncWrite` (serial port, pseudo-terminal, in-process duplex).

pub mod codec;
pub mod controller;
pub mod link;
pub mod words;

pub use controller::{Command, Completion, Controller, ControllerError, LogEntry, ProtocolConfig};
pub use link::{Link, LinkError};
