//! The live page's web server (axum on the session's tokio runtime), on the loopback interface
//! only: `/` the page (embedded, no CDN), `/state` the current snapshot, `/events` the
//! snapshots as server-sent events, the current one first, so a page opened mid-run or
//! reloaded catches up. Several pages may watch; a slow one skips snapshots (each is whole),
//! the run never waits for it.

use anyhow::Context;
use axum::extract::State;
use axum::response::sse::{Event, KeepAlive, Sse};
use axum::response::{Html, IntoResponse};
use axum::routing::get;
use axum::Router;
use futures::stream::{self, Stream, StreamExt};
use isopach::error::InputError;
use isopach::run::live::LiveHub;
use std::convert::Infallible;
use std::net::SocketAddr;
use tokio::sync::broadcast::error::RecvError;

/// The page: HTML, style and script in one embedded file.
const PAGE: &str = include_str!("live/page.html");

/// The default address: loopback, a port the OS chooses.
pub const DEFAULT_LISTEN: &str = "127.0.0.1:0";

/// Binds `addr` (refusing any but a loopback address) and serves the live page of `hub` in
/// the background; returns the address bound.
pub async fn serve(hub: LiveHub, addr: SocketAddr) -> anyhow::Result<SocketAddr> {
    loopback_only(addr)?;
    let listener = tokio::net::TcpListener::bind(addr)
        .await
        .with_context(|| format!("cannot listen on {addr} for the live view (is the port taken? leave --listen out for a free one)"))?;
    let bound = listener.local_addr()?;
    let app = Router::new()
        .route("/", get(|| async { Html(PAGE) }))
        .route("/state", get(state))
        .route("/events", get(events))
        .with_state(hub);
    tokio::spawn(async move {
        if let Err(e) = axum::serve(listener, app).await {
            tracing::warn!("live view stopped: {e}");
        }
    });
    Ok(bound)
}

/// Refuses an address that is not on the loopback interface (checked before a run starts).
pub fn loopback_only(addr: SocketAddr) -> Result<(), InputError> {
    if addr.ip().is_loopback() {
        return Ok(());
    }
    Err(InputError::argument(format!(
        "--listen {addr}: the live view serves the loopback interface only (127.0.0.1 or ::1), \
         so nobody else on the network can see the run; to watch from another computer, forward \
         the port over SSH"
    )))
}

async fn state(State(hub): State<LiveHub>) -> impl IntoResponse {
    (
        [(axum::http::header::CONTENT_TYPE, "application/json")],
        hub.latest().to_string(),
    )
}

async fn events(State(hub): State<LiveHub>) -> Sse<impl Stream<Item = Result<Event, Infallible>>> {
    // Subscribe before taking the current snapshot, so nothing falls between the two.
    let rx = hub.subscribe();
    let first = hub.latest();
    let later = stream::unfold((rx, hub), |(mut rx, hub)| async move {
        let text = match rx.recv().await {
            Ok(text) => text,
            // Behind: skip to the newest snapshot (each one is whole).
            Err(RecvError::Lagged(_)) => hub.latest(),
            Err(RecvError::Closed) => return None,
        };
        Some((Ok(Event::default().data(&*text)), (rx, hub)))
    });
    let all = stream::once(async move { Ok(Event::default().data(&*first)) }).chain(later);
    Sse::new(all).keep_alive(KeepAlive::default())
}
