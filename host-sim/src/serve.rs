//! `holdup serve`: the plant's link ([`crate::link`]) served live as a
//! Modbus TCP server.
//!
//! Threads: one accepting connections per listening port, one per client
//! connection ([`conn`]), and in real-time mode one ticking at the plant's
//! tick ([`clock`]). The link is behind one mutex, held for one request
//! (`handle`) or one tick at a time, never across socket I/O, so a slow,
//! silent or malformed client cannot hold up the tick. In sequence mode
//! the connection whose write raised the input sequence runs the tick
//! before it answers, so the answer to that write comes after the tick.
//!
//! Modbus has no authentication: writes are applied only from the
//! addresses of `--allow-write-from` ([`access`]), and a second port may
//! refuse every write; keep the link on a separate network behind a
//! firewall.

pub mod access;
pub mod checkpoint;
pub mod clock;
pub mod conn;
pub mod status;

use std::io;
use std::net::{SocketAddr, TcpListener, TcpStream};
use std::sync::atomic::{AtomicBool, AtomicU64, AtomicUsize, Ordering};
use std::sync::{Arc, Mutex, MutexGuard};
use std::thread::{self, JoinHandle};
use std::time::Duration;

use holdup_kernel::modbus::Clock;

use self::access::AllowList;
use self::checkpoint::CheckpointFile;
use crate::link::PlantLink;

/// The security note printed at start.
pub const SECURITY_NOTE: &str = "Modbus has no authentication: anyone who reaches the port can \
read, and writers not refused by --allow-write-from can change the inputs. Keep the link on a \
separate network behind a firewall, and give readers that only read the read-only port.";

/// How often blocked threads look at the stop flag.
const POLL: Duration = Duration::from_millis(50);

/// How the server listens.
#[derive(Clone, Debug)]
pub struct ServeOptions {
    /// The port for reads and allowed writes.
    pub listen: SocketAddr,
    /// An optional port that refuses every write (exception 01).
    pub read_only_listen: Option<SocketAddr>,
    /// Who may write on `listen`.
    pub allow_write: AllowList,
    /// A connection that sends no whole request for this long is closed.
    pub idle_timeout: Duration,
    /// Connections open at once, at most; further ones are closed at once.
    pub max_clients: usize,
}

/// The link and the tick count, behind the one lock.
pub struct Driven {
    /// The plant's link.
    pub link: Box<dyn PlantLink>,
    /// Ticks run since start.
    pub ticks: u64,
    /// Where the save coil writes (`None`: the coil is refused with 04).
    pub checkpoint: Option<CheckpointFile>,
}

impl Driven {
    /// Run one tick at the time of the tick count (ms since start).
    pub fn tick(&mut self) {
        let now = self.ticks.saturating_mul(u64::from(self.link.tick_ms()));
        let t = self.link.tick(now);
        if t.save_checkpoint {
            let saved = match self.checkpoint.as_mut() {
                Some(file) => file.save(self.link.as_ref()),
                None => Err("no checkpoint file".into()),
            };
            match &saved {
                Ok(info) => eprintln!(
                    "checkpoint saved at tick {}: slot {}, sequence {}, {} bytes",
                    self.ticks, info.slot, info.sequence, info.bytes
                ),
                Err(e) => eprintln!("warning: checkpoint not saved: {e}"),
            }
            self.link.checkpoint_saved(saved.is_ok());
        }
        self.ticks += 1;
    }
}

/// Counters of the server (not of the link: those are in its registers).
#[derive(Debug, Default)]
pub struct Stats {
    /// Requests answered or dropped, over every connection.
    pub requests: AtomicU64,
    /// Writes refused because of the writer's address or port.
    pub writes_refused: AtomicU64,
    /// Connections open now.
    pub clients: AtomicUsize,
    /// Connections closed at once because `max_clients` were open.
    pub clients_refused: AtomicU64,
    /// Connections closed for idleness or a broken header.
    pub clients_dropped: AtomicU64,
    /// Real-time ticks that started late ([`clock::LATE_FRACTION`]).
    pub late_ticks: AtomicU64,
    /// The largest lateness of a tick's start, µs.
    pub max_lateness_us: AtomicU64,
}

/// What every thread shares.
pub struct Shared {
    driven: Mutex<Driven>,
    /// Set to stop every thread.
    pub stop: AtomicBool,
    /// The server's counters.
    pub stats: Stats,
    /// The unit id served.
    pub unit_id: u8,
    /// What starts a tick.
    pub clock: Clock,
    /// The idle timeout.
    pub idle_timeout: Duration,
    /// Connections open at once, at most.
    pub max_clients: usize,
}

impl Shared {
    /// The link, locked (for one request or one tick). A thread that
    /// panicked while holding it leaves the link as it was: go on.
    pub fn lock(&self) -> MutexGuard<'_, Driven> {
        self.driven.lock().unwrap_or_else(|e| e.into_inner())
    }

    /// Whether the server is stopping.
    pub fn stopping(&self) -> bool {
        self.stop.load(Ordering::Relaxed)
    }
}

/// A running server.
pub struct Server {
    shared: Arc<Shared>,
    addr: SocketAddr,
    read_only_addr: Option<SocketAddr>,
    threads: Vec<JoinHandle<()>>,
}

impl Server {
    /// Bind the ports and start serving `link` (its spec says the unit id
    /// and the clock).
    ///
    /// Errors: a port that cannot be bound, with its address.
    pub fn start(link: Box<dyn PlantLink>, options: &ServeOptions) -> io::Result<Self> {
        let spec = *link.spec();
        let tick = Duration::from_millis(u64::from(link.tick_ms()));
        let shared = Arc::new(Shared {
            driven: Mutex::new(Driven {
                link,
                ticks: 0,
                checkpoint: None,
            }),
            stop: AtomicBool::new(false),
            stats: Stats::default(),
            unit_id: spec.unit_id,
            clock: spec.clock,
            idle_timeout: options.idle_timeout,
            max_clients: options.max_clients,
        });
        let bind = |addr: SocketAddr| {
            TcpListener::bind(addr).map_err(|e| io::Error::new(e.kind(), format!("{addr}: {e}")))
        };
        let main = bind(options.listen)?;
        let addr = main.local_addr()?;
        let mut threads = Vec::new();
        let read_only_addr = match options.read_only_listen {
            Some(a) => {
                let l = bind(a)?;
                let ro = l.local_addr()?;
                threads.push(accept_thread(l, Arc::clone(&shared), AllowList::nobody())?);
                Some(ro)
            }
            None => None,
        };
        threads.push(accept_thread(
            main,
            Arc::clone(&shared),
            options.allow_write.clone(),
        )?);
        if spec.clock == Clock::Free {
            let s = Arc::clone(&shared);
            threads.push(thread::spawn(move || clock::run_real_time(&s, tick)));
        }
        Ok(Self {
            shared,
            addr,
            read_only_addr,
            threads,
        })
    }

    /// The address served (with the port chosen when asked for port 0).
    pub fn local_addr(&self) -> SocketAddr {
        self.addr
    }

    /// The read-only port's address.
    pub fn read_only_addr(&self) -> Option<SocketAddr> {
        self.read_only_addr
    }

    /// Let the save coil write to `file` (the link must have been built
    /// with `checkpoints: true`, or the coil is refused before it).
    pub fn set_checkpoint(&self, file: CheckpointFile) {
        self.shared.lock().checkpoint = Some(file);
    }

    /// What the threads share (for the status line and the bench).
    pub fn shared(&self) -> &Arc<Shared> {
        &self.shared
    }

    /// Stop accepting and ticking; connections close within [`POLL`].
    pub fn stop(self) {
        self.shared.stop.store(true, Ordering::Relaxed);
        for t in self.threads {
            let _ = t.join();
        }
    }
}

fn accept_thread(
    listener: TcpListener,
    shared: Arc<Shared>,
    writers: AllowList,
) -> io::Result<JoinHandle<()>> {
    listener.set_nonblocking(true)?;
    Ok(thread::spawn(move || {
        while !shared.stopping() {
            match listener.accept() {
                Ok((stream, peer)) => admit(stream, peer, &shared, &writers),
                Err(e) if e.kind() == io::ErrorKind::WouldBlock => thread::sleep(POLL / 5),
                // A connection reset before it was accepted, or too many
                // open files: wait a little and go on.
                Err(_) => thread::sleep(POLL),
            }
        }
    }))
}

/// Start a connection's thread, or close it when the server is full.
fn admit(stream: TcpStream, peer: SocketAddr, shared: &Arc<Shared>, writers: &AllowList) {
    let open = shared.stats.clients.fetch_add(1, Ordering::SeqCst);
    if open >= shared.max_clients {
        shared.stats.clients.fetch_sub(1, Ordering::SeqCst);
        shared.stats.clients_refused.fetch_add(1, Ordering::Relaxed);
        return;
    }
    let may_write = writers.allows(peer.ip());
    let s = Arc::clone(shared);
    let spawned = thread::Builder::new()
        .name(format!("modbus {peer}"))
        .spawn(move || {
            conn::serve(stream, &s, may_write);
            s.stats.clients.fetch_sub(1, Ordering::SeqCst);
        });
    if spawned.is_err() {
        shared.stats.clients.fetch_sub(1, Ordering::SeqCst);
        shared.stats.clients_refused.fetch_add(1, Ordering::Relaxed);
    }
}
