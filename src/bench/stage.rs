//! The `Stage` capability trait and the G-code stage that implements it over a [`Link`].
//!
//! Soft limits are checked before anything is sent: a target, or its anti-backlash approach
//! point, outside the travel box is refused and no line goes out. The same code drives a real
//! controller on a serial port and the virtual one, so the simulated bench tests it too.

use super::gcode::link::Port;
use super::gcode::{
    Command, Completion, Controller, ControllerError, Link, LinkError, LogEntry, ProtocolConfig,
};
use super::limits::{Approach, LimitViolation, SoftLimits};
use super::machine::StageSpec;
use futures::future::BoxFuture;
use std::sync::{Arc, Mutex};

/// The last confirmed stage position, shared with whoever needs it (the virtual spectrometer
/// reads it to know where it looks). `None` while moving or unknown.
#[derive(Debug, Clone, Default)]
pub struct PositionHandle(Arc<Mutex<Option<[f64; 2]>>>);

impl PositionHandle {
    /// A handle holding `p`.
    pub fn new(p: Option<[f64; 2]>) -> PositionHandle {
        PositionHandle(Arc::new(Mutex::new(p)))
    }
    /// The position, stage frame, mm.
    pub fn get(&self) -> Option<[f64; 2]> {
        *self.0.lock().unwrap_or_else(|e| e.into_inner())
    }
    /// Records a position.
    pub fn set(&self, p: Option<[f64; 2]>) {
        *self.0.lock().unwrap_or_else(|e| e.into_inner()) = p;
    }
}

/// Why a stage operation failed.
#[derive(Debug, thiserror::Error)]
pub enum StageError {
    #[error("move to ({:.3}, {:.3}) mm refused, nothing sent: {}{violation}", target[0], target[1], if *approach { "its anti-backlash approach point breaks a soft limit: " } else { "" })]
    OutsideTravel {
        target: [f64; 2],
        approach: bool,
        violation: LimitViolation,
    },
    #[error("cannot home: stage.home is empty in the machine file; home the stage by hand, or list the controller's homing line(s) there")]
    NoHoming,
    #[error(transparent)]
    Link(#[from] LinkError),
    #[error(transparent)]
    Open(#[from] super::transport::OpenError),
}

/// An XY stage: moves in stage coordinates (mm), with soft limits checked before motion.
///
/// Object-safe (boxed futures) so the sequencer can hold a `Box<dyn Stage>`. To stop on
/// Ctrl-C, drop the pending motion future (e.g. the losing branch of `tokio::select!`) and
/// call [`Stage::stop`].
pub trait Stage: Send {
    /// Queues motion to (x, y), approaching from the configured side. Refused, with nothing
    /// sent, if the target or its approach point lies outside the soft limits.
    fn move_to(&mut self, x_mm: f64, y_mm: f64) -> BoxFuture<'_, Result<(), StageError>>;
    /// Waits until motion has ended; the position confirmed (or commanded), if known.
    fn wait_idle(&mut self) -> BoxFuture<'_, Result<Option<[f64; 2]>, StageError>>;
    /// Homes the stage (after a reset if an alarm is latched: the user's say).
    fn home(&mut self) -> BoxFuture<'_, Result<(), StageError>>;
    /// The current position: asked of the controller when it answers status queries,
    /// else the last confirmed one.
    fn position(&mut self) -> BoxFuture<'_, Result<Option<[f64; 2]>, StageError>>;
    /// Stops motion at once.
    fn stop(&mut self) -> BoxFuture<'_, Result<(), StageError>>;
    /// The shared handle holding the last confirmed position.
    fn position_handle(&self) -> PositionHandle;
    /// The soft-limit box.
    fn limits(&self) -> SoftLimits;
    /// Where the stage is reached (port name) for messages.
    fn describe(&self) -> String;
    /// The recent G-code conversation, one line per entry (`> sent`, `< received`, `# note`).
    fn transcript(&self) -> Vec<String>;
}

/// A G-code stage over a byte stream.
pub struct GcodeStage<S> {
    link: Link<S>,
    limits: SoftLimits,
    approach: Approach,
    /// Whether a status query is configured (and so the controller is asked where it is).
    asks_status: bool,
    /// Cleared once the controller has ignored or refused a status query: later position
    /// requests fall back to the last confirmed position without waiting again.
    answers_status: bool,
    has_home: bool,
    position: PositionHandle,
}

impl<S: Port> GcodeStage<S> {
    /// Connects over `stream` (absorbs the banner, sends unlock and init lines).
    pub async fn connect(
        stream: S,
        spec: &StageSpec,
        port: &str,
    ) -> Result<GcodeStage<S>, StageError> {
        let ctrl = Controller::new(ProtocolConfig::from_spec(spec));
        let mut link = Link::new(stream, ctrl, port);
        // A controller that stays locked although its unlock line went out is in an alarm
        // only a reset clears: with a reset configured it is still usable — the alarm stays
        // latched, every motion is refused with what to do, and homing resets it first.
        // Without an unlock line, being locked is a machine-file problem: the error says so.
        let recoverable = !spec.unlock.is_empty() && !spec.reset.is_empty();
        match link.run(Command::Connect).await {
            Err(LinkError::Controller(e @ ControllerError::Locked { .. })) if recoverable => {
                tracing::warn!(port, "{e}");
            }
            r => {
                r?;
            }
        }
        Ok(GcodeStage {
            link,
            limits: SoftLimits::from_spec(spec),
            approach: Approach::from_spec(spec),
            asks_status: spec.status_query_in_use().is_some(),
            answers_status: true,
            has_home: !spec.home.is_empty(),
            position: PositionHandle::default(),
        })
    }

    /// The G-code link (for its transcript and state).
    pub fn link(&self) -> &Link<S> {
        &self.link
    }

    /// The position the controller reports, when a status query is configured and answered.
    /// A query that goes unanswered or is refused is not an error (some firmware has no
    /// status report): the caller falls back to the last confirmed position, and the query
    /// is not tried again on this connection.
    async fn reported_position(&mut self) -> Result<Option<[f64; 2]>, StageError> {
        if !(self.asks_status && self.answers_status) {
            return Ok(None);
        }
        match self.link.run(Command::Query).await {
            Ok(Completion::Status(s)) => Ok(self.link.controller().work_position(&s)),
            Ok(_) => Ok(None),
            Err(LinkError::Controller(
                e @ (ControllerError::NoStatus { .. } | ControllerError::Rejected { .. }),
            )) => {
                tracing::info!(port = %self.link.port(), "no position from the status query ({e}); using the last confirmed one");
                self.answers_status = false;
                Ok(None)
            }
            Err(e) => Err(e.into()),
        }
    }

    fn check(&self, target: [f64; 2]) -> Result<Vec<[f64; 2]>, StageError> {
        let refuse = |approach, violation| StageError::OutsideTravel {
            target,
            approach,
            violation,
        };
        self.limits.check(target).map_err(|v| refuse(false, v))?;
        let moves = self
            .approach
            .moves(self.link.controller().position(), target);
        for m in &moves[..moves.len() - 1] {
            self.limits.check(*m).map_err(|v| refuse(true, v))?;
        }
        Ok(moves)
    }
}

impl<S: Port> Stage for GcodeStage<S> {
    fn move_to(&mut self, x_mm: f64, y_mm: f64) -> BoxFuture<'_, Result<(), StageError>> {
        Box::pin(async move {
            let moves = self.check([x_mm, y_mm])?;
            self.position.set(None);
            for m in moves {
                self.link
                    .run(Command::Move {
                        x_mm: m[0],
                        y_mm: m[1],
                    })
                    .await?;
            }
            Ok(())
        })
    }

    fn wait_idle(&mut self) -> BoxFuture<'_, Result<Option<[f64; 2]>, StageError>> {
        Box::pin(async move {
            let p = match self.link.run(Command::WaitIdle).await? {
                Completion::Idle { position } => position,
                _ => None,
            };
            self.position.set(p);
            Ok(p)
        })
    }

    fn home(&mut self) -> BoxFuture<'_, Result<(), StageError>> {
        Box::pin(async move {
            if !self.has_home {
                return Err(StageError::NoHoming);
            }
            self.position.set(None);
            if self.link.controller().alarm().is_some() {
                self.link.run(Command::Reset).await?;
            }
            self.link.run(Command::Home).await?;
            if let Some(p) = self.reported_position().await? {
                self.position.set(Some(p));
            }
            Ok(())
        })
    }

    fn position(&mut self) -> BoxFuture<'_, Result<Option<[f64; 2]>, StageError>> {
        Box::pin(async move {
            match self.reported_position().await? {
                Some(p) => Ok(Some(p)),
                None => Ok(self.link.controller().position()),
            }
        })
    }

    fn stop(&mut self) -> BoxFuture<'_, Result<(), StageError>> {
        Box::pin(async move {
            self.position.set(None);
            self.link.stop().await?;
            Ok(())
        })
    }

    fn position_handle(&self) -> PositionHandle {
        self.position.clone()
    }

    fn limits(&self) -> SoftLimits {
        self.limits
    }

    fn describe(&self) -> String {
        self.link.port().to_string()
    }

    fn transcript(&self) -> Vec<String> {
        self.link
            .transcript()
            .iter()
            .map(|(t, e)| match e {
                LogEntry::Sent(s) => format!("{t:9.3} > {s}"),
                LogEntry::Received(s) => format!("{t:9.3} < {s}"),
                LogEntry::Note(s) => format!("{t:9.3} # {s}"),
            })
            .collect()
    }
}
