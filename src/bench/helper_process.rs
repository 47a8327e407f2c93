//! Running a spectrometer helper program safely: no shell, its own process group (so the
//! children it leaves behind die with it), stdout read up to a cap and stderr drained at the
//! same time (a helper filling either pipe can neither deadlock nor exhaust memory).
//!
//! The group is killed when the output passes the cap, on timeout, when the caller drops the
//! future (a stop), and right after the helper exits (its orphans). A child that makes itself
//! a new session (`setsid`) leaves the group and is beyond reach; no plain fork does that.

use std::io;
use std::process::{ExitStatus, Stdio};
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::Duration;
use tokio::io::{AsyncRead, AsyncReadExt};

/// Bytes kept of an output that is only quoted (stderr, an overflowing stdout): far more
/// than an excerpt needs; the rest is read and dropped.
pub const HEAD_KEPT: usize = 4096;

/// What a helper that ran to its end left.
#[derive(Debug)]
pub struct Finished {
    pub status: ExitStatus,
    /// Everything it printed on stdout (at most the cap).
    pub stdout: Vec<u8>,
    /// The first [`HEAD_KEPT`] bytes of its stderr.
    pub stderr_head: Vec<u8>,
    /// How many bytes it printed on stderr in all.
    pub stderr_len: u64,
}

/// Why a helper gave no usable output.
#[derive(Debug)]
pub enum HelperFailure {
    /// It could not be started (or its pipes failed).
    Start(io::Error),
    /// It ran past the timeout and was killed.
    Timeout,
    /// Its stdout passed `cap` bytes; it was killed. `head`: the start of what it printed.
    Overflow { cap: usize, head: Vec<u8> },
}

/// A process group killed (SIGKILL) on [`ProcessGroup::kill`] and on drop, until disarmed.
pub struct ProcessGroup {
    pgid: libc::pid_t,
    armed: AtomicBool,
}

impl ProcessGroup {
    /// Kills every process of the group (nothing after [`ProcessGroup::disarm`]).
    pub fn kill(&self) {
        if self.armed.load(Ordering::SeqCst) {
            // SAFETY: killpg has no memory effects; a group that is gone gives ESRCH.
            unsafe {
                libc::killpg(self.pgid, libc::SIGKILL);
            }
        }
    }

    /// Kills the group one last time and forgets it: once the leader is reaped its id may be
    /// reused, so the guard must not fire later.
    pub fn kill_and_disarm(&self) {
        self.kill();
        self.armed.store(false, Ordering::SeqCst);
    }
}

impl Drop for ProcessGroup {
    fn drop(&mut self) {
        self.kill();
    }
}

/// Starts `argv` (no shell) in a new process group with piped stdout and stderr; stdin as
/// given. The group guard kills the helper and all its children when dropped.
pub fn spawn_in_group(
    argv: &[String],
    stdin: Stdio,
) -> io::Result<(tokio::process::Child, ProcessGroup)> {
    let (program, args) = argv
        .split_first()
        .ok_or_else(|| io::Error::new(io::ErrorKind::InvalidInput, "empty command"))?;
    let mut command = tokio::process::Command::new(program);
    command
        .args(args)
        .stdin(stdin)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .process_group(0)
        .kill_on_drop(true);
    let child = spawn_retrying_busy(&mut command)?;
    let pid = child
        .id()
        .ok_or_else(|| io::Error::other("the helper exited before its id was read"))?;
    let pgid = libc::pid_t::try_from(pid).map_err(io::Error::other)?;
    Ok((
        child,
        ProcessGroup {
            pgid,
            armed: AtomicBool::new(true),
        },
    ))
}

/// Spawns `command`, retrying for up to about a second while the kernel says the program
/// file is busy (`ETXTBSY`): a helper script that was just written, or is being replaced, can
/// still be open for writing in another process for a moment (common practice: a process
/// forked elsewhere holds the writer's descriptor until its own `exec`).
fn spawn_retrying_busy(command: &mut tokio::process::Command) -> io::Result<tokio::process::Child> {
    const TRIES: u32 = 20;
    let mut tries = 1;
    loop {
        match command.spawn() {
            Err(e) if e.raw_os_error() == Some(libc::ETXTBSY) && tries < TRIES => {
                tries += 1;
                std::thread::sleep(Duration::from_millis(50));
            }
            other => return other,
        }
    }
}

/// Runs `argv` to its end (see the module doc): stdout up to `stdout_cap` bytes, stderr
/// drained concurrently, everything killed after `timeout`.
pub async fn run_capped(
    argv: &[String],
    stdout_cap: usize,
    timeout: Duration,
) -> Result<Finished, HelperFailure> {
    let (mut child, group) = spawn_in_group(argv, Stdio::null()).map_err(HelperFailure::Start)?;
    let stdout = child.stdout.take().expect("stdout is piped");
    let stderr = child.stderr.take().expect("stderr is piped");
    let group = &group;
    let work = async {
        let out = async {
            let r = read_capped(stdout, stdout_cap).await;
            if !matches!(r, Ok(Capped::Whole(_))) {
                group.kill();
            }
            r
        };
        let status = async {
            let s = child.wait().await;
            // The helper is gone: kill what it left running, so its pipes close.
            group.kill_and_disarm();
            s
        };
        tokio::join!(out, read_head(stderr, HEAD_KEPT as u64), status)
    };
    let (out, err, status) = match tokio::time::timeout(timeout, work).await {
        Ok(r) => r,
        Err(_) => {
            group.kill();
            return Err(HelperFailure::Timeout);
        }
    };
    let (stderr_head, stderr_len) = err.map_err(HelperFailure::Start)?;
    let status = status.map_err(HelperFailure::Start)?;
    match out.map_err(HelperFailure::Start)? {
        Capped::Whole(stdout) => Ok(Finished {
            status,
            stdout,
            stderr_head,
            stderr_len,
        }),
        Capped::Over(head) => Err(HelperFailure::Overflow {
            cap: stdout_cap,
            head,
        }),
    }
}

/// What [`read_capped`] got.
enum Capped {
    Whole(Vec<u8>),
    /// Past the cap: the first bytes.
    Over(Vec<u8>),
}

/// Reads `r` to its end unless it gives more than `cap` bytes.
async fn read_capped(r: impl AsyncRead + Unpin, cap: usize) -> io::Result<Capped> {
    let mut buf = Vec::new();
    // One byte past the cap is enough to know it was passed.
    r.take(cap as u64 + 1).read_to_end(&mut buf).await?;
    if buf.len() > cap {
        buf.truncate(HEAD_KEPT);
        return Ok(Capped::Over(buf));
    }
    Ok(Capped::Whole(buf))
}

/// Reads `r` to its end keeping the first `keep` bytes; also the total length.
async fn read_head(mut r: impl AsyncRead + Unpin, keep: u64) -> io::Result<(Vec<u8>, u64)> {
    let mut head = Vec::new();
    (&mut r).take(keep).read_to_end(&mut head).await?;
    let rest = tokio::io::copy(&mut r, &mut tokio::io::sink()).await?;
    let total = head.len() as u64 + rest;
    Ok((head, total))
}
