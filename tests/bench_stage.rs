//! The G-code stage (real adapter and state machine) against the virtual controller over an
//! in-process duplex stream, in paused tokio time: plans reach their targets under every
//! strategy, soft limits refuse before sending, and every injected fault ends in its own
//! error without hanging.

use isopach::bench::gcode::{ControllerError, LinkError};
use isopach::bench::machine::{self, FaultKind, FaultSpec, MachineFile};
use isopach::bench::sim::clock::SimClock;
use isopach::bench::sim::controller::VirtualConfig;
use isopach::bench::sim::server::spawn_duplex;
use isopach::bench::stage::{GcodeStage, Stage, StageError};
use std::path::Path;
use tokio::io::DuplexStream;

fn fixture(name: &str) -> MachineFile {
    let p = Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("fixtures/machines")
        .join(name);
    let mut m = machine::load(&p).unwrap_or_else(|e| panic!("{e}")).machine;
    // The virtual controller announces itself with the banner the machine file waits for.
    m.simulation.controller.banner = format!("{} (virtual)", m.stage.banner);
    m
}

async fn stage(m: &MachineFile) -> Result<GcodeStage<DuplexStream>, StageError> {
    let host = spawn_duplex(VirtualConfig::from_machine(m), SimClock::new(1.0));
    GcodeStage::connect(host, &m.stage, "virtual").await
}

fn with_fault(name: &str, kind: FaultKind, at_line: usize) -> MachineFile {
    let mut m = fixture(name);
    m.simulation.faults.push(FaultSpec {
        kind,
        at_line,
        code: 5,
    });
    m
}

fn controller_error(e: StageError) -> ControllerError {
    match e {
        StageError::Link(LinkError::Controller(c)) => c,
        other => panic!("expected a controller error, got {other}"),
    }
}

#[tokio::test(start_paused = true)]
async fn plan_reaches_every_site_under_each_strategy() {
    for name in ["dwell.toml", "m400.toml", "poll.toml"] {
        let m = fixture(name);
        let mut s = stage(&m).await.unwrap_or_else(|e| panic!("{name}: {e}"));
        for (x, y) in [(40.0, 60.0), (60.0, 60.0), (60.0, 40.0), (40.0, 40.0)] {
            s.move_to(x, y).await.unwrap();
            let p = s
                .wait_idle()
                .await
                .unwrap()
                .expect("position known after motion");
            assert!(
                (p[0] - x).abs() < 1e-9 && (p[1] - y).abs() < 1e-9,
                "{name}: {p:?}"
            );
            assert_eq!(s.position_handle().get(), Some(p));
        }
        if m.stage.motion_complete == machine::MotionComplete::Poll {
            // Position read back from the virtual controller's status report.
            assert_eq!(s.position().await.unwrap(), Some([40.0, 40.0]));
        }
    }
}

#[tokio::test(start_paused = true)]
async fn soft_limits_refuse_before_anything_is_sent() {
    let m = fixture("dwell.toml");
    let mut s = stage(&m).await.unwrap();
    let before = s.transcript().len();
    let e = s.move_to(199.5, 50.0).await.unwrap_err();
    assert!(
        matches!(
            e,
            StageError::OutsideTravel {
                approach: false,
                ..
            }
        ),
        "{e}"
    );
    assert!(
        e.to_string()
            .contains("travel_x_mm = [0, 200], margin_mm = 1"),
        "{e}"
    );
    // The approach point (0.5 mm below) of a site on the lower margin breaks the limit.
    let e = s.move_to(1.2, 50.0).await.unwrap_err();
    assert!(
        matches!(e, StageError::OutsideTravel { approach: true, .. }),
        "{e}"
    );
    assert_eq!(s.transcript().len(), before, "nothing was sent");
}

#[tokio::test(start_paused = true)]
async fn start_locked_controller_is_unlocked_by_the_machine_files_line() {
    let mut m = fixture("poll.toml");
    m.simulation.controller.start_locked = true;
    let mut s = stage(&m).await.unwrap();
    s.move_to(100.0, 100.0).await.unwrap();
    assert_eq!(s.wait_idle().await.unwrap(), Some([100.0, 100.0]));
    // Without the unlock line, init is rejected and the message says what to change.
    m.stage.unlock.clear();
    let e = stage(&m).await.err().expect("locked");
    assert!(e.to_string().contains("stage.unlock"), "{e}");
}

// Lines: 1 `$X`, 2 `G21`, 3 `G90`, then the first move's approach point (4) and target (5).

#[tokio::test(start_paused = true)]
async fn fault_dropped_ok() {
    let mut s = stage(&with_fault("dwell.toml", FaultKind::DropOk, 4))
        .await
        .unwrap();
    let e = controller_error(s.move_to(50.0, 50.0).await.unwrap_err());
    assert!(
        matches!(&e, ControllerError::NoReply { line, .. } if line.starts_with("G1 X49.500")),
        "{e}"
    );
}

#[tokio::test(start_paused = true)]
async fn fault_garbage() {
    let mut s = stage(&with_fault("dwell.toml", FaultKind::Garbage, 4))
        .await
        .unwrap();
    let e = controller_error(s.move_to(50.0, 50.0).await.unwrap_err());
    assert!(matches!(e, ControllerError::Garbled { .. }), "{e}");
}

#[tokio::test(start_paused = true)]
async fn fault_error_reply() {
    let mut s = stage(&with_fault("dwell.toml", FaultKind::Error, 5))
        .await
        .unwrap();
    let e = controller_error(s.move_to(50.0, 50.0).await.unwrap_err());
    assert!(
        matches!(e, ControllerError::Rejected { code: Some(5), .. }),
        "{e}"
    );
}

#[tokio::test(start_paused = true)]
async fn fault_alarm_mid_move_stops_everything_until_home() {
    let mut s = stage(&with_fault("poll.toml", FaultKind::Alarm, 5))
        .await
        .unwrap();
    s.move_to(150.0, 150.0).await.unwrap();
    let e = controller_error(s.wait_idle().await.unwrap_err());
    assert!(
        matches!(&e, ControllerError::Alarm { reply, .. } if reply == "ALARM:5"),
        "{e}"
    );
    let before = s.transcript().len();
    let e = controller_error(s.move_to(100.0, 100.0).await.unwrap_err());
    assert!(matches!(e, ControllerError::Alarmed { .. }), "{e}");
    assert_eq!(
        s.transcript().len(),
        before,
        "no motion sent while the alarm is latched"
    );
    // Homing is the user's say: reset, unlock, init, home.
    s.home().await.unwrap();
    assert_eq!(s.position_handle().get(), Some([0.0, 0.0]));
    s.move_to(100.0, 100.0).await.unwrap();
    assert_eq!(s.wait_idle().await.unwrap(), Some([100.0, 100.0]));
}

#[tokio::test(start_paused = true)]
async fn fault_stall_under_dwell_and_poll() {
    for name in ["dwell.toml", "poll.toml"] {
        let mut s = stage(&with_fault(name, FaultKind::Stall, 5)).await.unwrap();
        s.move_to(150.0, 150.0).await.unwrap();
        let e = controller_error(s.wait_idle().await.unwrap_err());
        assert!(
            matches!(e, ControllerError::MotionTimeout { .. }),
            "{name}: {e}"
        );
    }
}

#[tokio::test(start_paused = true)]
async fn fault_disconnect() {
    let mut s = stage(&with_fault("dwell.toml", FaultKind::Disconnect, 4))
        .await
        .unwrap();
    let e = controller_error(s.move_to(50.0, 50.0).await.unwrap_err());
    assert!(matches!(e, ControllerError::Disconnected { .. }), "{e}");
    let e = controller_error(s.move_to(60.0, 60.0).await.unwrap_err());
    assert!(
        matches!(e, ControllerError::Disconnected { .. }),
        "no silent reconnect: {e}"
    );
}

#[tokio::test(start_paused = true)]
async fn stop_during_motion_resets_the_controller() {
    let m = fixture("poll.toml");
    let mut s = stage(&m).await.unwrap();
    s.move_to(250.0, 250.0).await.unwrap();
    let r = tokio::time::timeout(std::time::Duration::from_millis(300), s.wait_idle()).await;
    assert!(r.is_err(), "a long move is still running");
    s.stop().await.unwrap();
    assert!(
        s.transcript().iter().any(|l| l.ends_with("> \\u{18}")),
        "{:?}",
        s.transcript()
    );
    // The controller lost its position in the reset: it reports an alarm until homed.
    let e = controller_error(s.position().await.unwrap_err());
    assert!(matches!(e, ControllerError::Alarm { .. }), "{e}");
    s.home().await.unwrap();
    assert_eq!(s.position().await.unwrap(), Some([0.0, 0.0]));
}
