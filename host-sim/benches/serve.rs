//! Load on `holdup serve`: 16 client threads, each on its own connection,
//! poll the whole input block (function 04) as fast as the server answers,
//! while the server ticks in real time. Prints requests per second,
//! latency percentiles and the tick's lateness.
//!
//! The demo plant is served at its own tick (1 s) and at 100 ms (the same
//! plant with a shorter tick: ten times the ticks to be late in).
//!
//! Run: cargo bench -p holdup-sim --bench serve

use std::io::{Read, Write};
use std::net::{SocketAddr, TcpStream};
use std::path::Path;
use std::sync::atomic::Ordering;
use std::time::{Duration, Instant};

use holdup_sim::serve::access::AllowList;
use holdup_sim::serve::{ServeOptions, Server};
use holdup_sim::{config, link};

const CLIENTS: usize = 16;
const REQUESTS_PER_CLIENT: usize = 50_000;

/// One client's latencies, µs.
fn poll(addr: SocketAddr, count: u16, requests: usize) -> Vec<u32> {
    let mut s = TcpStream::connect(addr).expect("connects");
    s.set_nodelay(true).unwrap();
    s.set_read_timeout(Some(Duration::from_secs(5))).unwrap();
    let mut out = Vec::with_capacity(requests);
    let mut answer = vec![0u8; 9 + 2 * usize::from(count)];
    for k in 0..requests {
        let tr = (k as u16).to_be_bytes();
        let c = count.to_be_bytes();
        let req = [tr[0], tr[1], 0, 0, 0, 6, 1, 4, 0, 0, c[0], c[1]];
        let t = Instant::now();
        s.write_all(&req).unwrap();
        s.read_exact(&mut answer).expect("a whole answer");
        out.push(u32::try_from(t.elapsed().as_micros()).unwrap_or(u32::MAX));
        assert_eq!(answer[..2], tr, "transaction id echoed");
        assert_eq!(answer[7], 4, "a normal answer");
    }
    out
}

fn run(config_text: &str, label: &str) {
    let dir = std::env::temp_dir().join(format!("holdup-bench-serve-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join("plant.toml");
    std::fs::write(&path, config_text).unwrap();
    let plant = config::load(&path).expect("the bench plant loads");
    let spec = link::free_running();
    let link = link::build_for(&plant, spec).expect("the link builds");
    let count = link.map().input_len();
    let options = ServeOptions {
        listen: "127.0.0.1:0".parse().unwrap(),
        read_only_listen: None,
        allow_write: AllowList::loopback(),
        idle_timeout: Duration::from_secs(30),
        max_clients: CLIENTS + 1,
    };
    let server = Server::start(link, &options).expect("binds");
    let addr = server.local_addr();
    let started = Instant::now();
    let threads: Vec<_> = (0..CLIENTS)
        .map(|_| std::thread::spawn(move || poll(addr, count, REQUESTS_PER_CLIENT)))
        .collect();
    let mut lat: Vec<u32> = threads
        .into_iter()
        .flat_map(|t| t.join().expect("a client thread"))
        .collect();
    let wall = started.elapsed().as_secs_f64();
    let stats = &server.shared().stats;
    let ticks = server.shared().lock().ticks;
    let late = stats.late_ticks.load(Ordering::Relaxed);
    let max_late_us = stats.max_lateness_us.load(Ordering::Relaxed);
    server.stop();
    let _ = std::fs::remove_dir_all(&dir);
    lat.sort_unstable();
    let pct = |p: f64| lat[((lat.len() - 1) as f64 * p) as usize];
    println!(
        "| {label} | {CLIENTS} | {} | {:.0} | {} | {} | {} | {ticks} | {late} | {:.2} |",
        lat.len(),
        lat.len() as f64 / wall,
        pct(0.5),
        pct(0.99),
        lat[lat.len() - 1],
        max_late_us as f64 / 1000.0,
    );
}

fn main() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("..");
    let demo = std::fs::read_to_string(root.join("fixtures/demo/plant.toml"))
        .expect("fixtures/demo/plant.toml");
    assert!(demo.contains("tick = \"1 s\""), "the demo plant's tick");
    println!(
        "holdup serve under load: {CLIENTS} clients each reading the whole input block \
{REQUESTS_PER_CLIENT} times over TCP, real-time clock (late: > 10 % of the tick)\n"
    );
    println!("| plant tick | clients | requests | req/s | p50 µs | p99 µs | max µs | ticks | late ticks | max lateness ms |");
    println!("|---|---|---|---|---|---|---|---|---|---|");
    run(&demo, "1 s");
    run(
        &demo.replace("tick = \"1 s\"", "tick = \"100 ms\""),
        "100 ms",
    );
}
