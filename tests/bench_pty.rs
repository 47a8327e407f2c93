//! The real serial adapter (tokio-serial, opened by path like a device) against the virtual
//! controller over a pseudo-terminal pair, in scaled real time.

use isopach::bench::machine;
use isopach::bench::sim::clock::SimClock;
use isopach::bench::sim::controller::VirtualConfig;
use isopach::bench::sim::pty::PtyController;
use isopach::bench::stage::{GcodeStage, Stage};
use isopach::bench::transport::open_serial;
use std::path::Path;

#[tokio::test(flavor = "multi_thread", worker_threads = 2)]
async fn serial_adapter_drives_the_virtual_controller_over_a_pty() {
    let p = Path::new(env!("CARGO_MANIFEST_DIR")).join("fixtures/machines/poll.toml");
    let mut m = machine::load(&p).unwrap().machine;
    m.simulation.controller.banner = "Grbl (virtual)".into();
    m.simulation.controller.start_locked = true;
    let pty = PtyController::spawn(VirtualConfig::from_machine(&m), SimClock::new(20.0)).unwrap();
    m.stage.port = pty.path().to_string();

    let port = open_serial(&m.stage.port, m.stage.baud).unwrap();
    let mut stage = GcodeStage::connect(port, &m.stage, &m.stage.port)
        .await
        .unwrap();
    for (x, y) in [(120.0, 130.0), (180.0, 130.0), (150.0, 170.0)] {
        stage.move_to(x, y).await.unwrap();
        assert_eq!(stage.wait_idle().await.unwrap(), Some([x, y]));
    }
    stage.home().await.unwrap();
    assert_eq!(stage.position().await.unwrap(), Some([0.0, 0.0]));
    let t = stage.transcript();
    assert!(
        t.iter().any(|l| l.contains("< Grbl (virtual)")),
        "banner read through the pty: {t:?}"
    );
    assert!(t.iter().any(|l| l.contains("> $X")));
    drop(stage);

    // A second client can open the same path after the first has gone.
    let port = open_serial(&m.stage.port, m.stage.baud).unwrap();
    let mut stage = GcodeStage::connect(port, &m.stage, &m.stage.port)
        .await
        .unwrap();
    stage.move_to(100.0, 100.0).await.unwrap();
    assert_eq!(stage.wait_idle().await.unwrap(), Some([100.0, 100.0]));
    pty.abort();
}

#[test]
fn opening_a_missing_port_says_what_to_check() {
    let e = open_serial("/dev/isopach-no-such-port", 115200).unwrap_err();
    let msg = e.to_string();
    assert!(
        msg.contains("/dev/isopach-no-such-port") && msg.contains("stage.port"),
        "{msg}"
    );
}
