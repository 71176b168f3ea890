//! `holdup serve` in-process, checked with a Modbus TCP client built on
//! `rmodbus::client` (request frames and response parsing from the
//! crate's client side) and against the replay pipeline as reference.
//! The full protocol check with pymodbus is `tests/modbus/serve.py`.

use std::io::{Read, Write};
use std::net::{SocketAddr, TcpStream};
use std::path::{Path, PathBuf};
use std::time::Duration;

use holdup_kernel::modbus::{Clock, LinkSpec, RegisterMap, WordOrder};
use holdup_sim::plant::Plant;
use holdup_sim::serve::access::AllowList;
use holdup_sim::serve::{ServeOptions, Server};
use holdup_sim::{config, link, replay};
use rmodbus::client::ModbusRequest;
use rmodbus::ErrorKind;

const UNIT: u8 = 1;

fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("../fixtures/link")
        .join(name)
}

fn plant() -> Plant {
    config::load(&fixture("plant.toml")).expect("fixtures/link/plant.toml loads")
}

fn spec(clock: Clock) -> LinkSpec {
    LinkSpec {
        unit_id: UNIT,
        word_order: WordOrder::HighFirst,
        clock,
        stale_after_ms: 0,
        checkpoints: false,
    }
}

fn start(plant: &Plant, clock: Clock, writers: AllowList) -> (Server, RegisterMap) {
    let link = link::build_for(plant, spec(clock)).expect("the fixture's link builds");
    let map = *link.map();
    let options = ServeOptions {
        listen: "127.0.0.1:0".parse().unwrap(),
        read_only_listen: None,
        allow_write: writers,
        idle_timeout: Duration::from_secs(5),
        max_clients: 8,
    };
    (
        Server::start(link, &options).expect("binds a free port"),
        map,
    )
}

/// A Modbus TCP client: rmodbus builds the requests and parses the
/// answers; this only moves the bytes.
struct Client {
    stream: TcpStream,
    tr: u16,
}

impl Client {
    fn connect(addr: SocketAddr) -> Self {
        let stream = TcpStream::connect(addr).expect("connects");
        stream
            .set_read_timeout(Some(Duration::from_secs(5)))
            .unwrap();
        Self { stream, tr: 0 }
    }

    fn request(&mut self) -> ModbusRequest {
        self.tr = self.tr.wrapping_add(1);
        ModbusRequest::new_tcp_udp(UNIT, self.tr)
    }

    /// Send a frame, read one whole response by its MBAP length.
    fn exchange(&mut self, frame: &[u8]) -> Vec<u8> {
        self.stream.write_all(frame).unwrap();
        let mut head = [0u8; 6];
        self.stream.read_exact(&mut head).expect("an answer");
        let n = usize::from(u16::from_be_bytes([head[4], head[5]]));
        let mut rest = vec![0u8; n];
        self.stream.read_exact(&mut rest).unwrap();
        [head.to_vec(), rest].concat()
    }

    fn inputs(&mut self, address: u16, count: u16) -> Result<Vec<u16>, ErrorKind> {
        let mut req = self.request();
        let mut frame = Vec::new();
        req.generate_get_inputs(address, count, &mut frame)?;
        let answer = self.exchange(&frame);
        let mut out = Vec::new();
        req.parse_u16(&answer, &mut out)?;
        Ok(out)
    }

    fn write(&mut self, address: u16, values: &[u16]) -> Result<(), ErrorKind> {
        let mut req = self.request();
        let mut frame = Vec::new();
        req.generate_set_holdings_bulk(address, values, &mut frame)?;
        let answer = self.exchange(&frame);
        req.parse_ok(&answer)
    }
}

fn f32_words(x: f64) -> [u16; 2] {
    WordOrder::HighFirst.split((x as f32).to_bits())
}

/// The log's rows: the time and each tag's value.
fn log_rows() -> (Vec<String>, Vec<Vec<f64>>) {
    let text = std::fs::read_to_string(fixture("log.csv")).unwrap();
    let mut lines = text.lines();
    let header = lines.next().unwrap().split(',').map(String::from).collect();
    let rows = lines
        .map(|l| l.split(',').map(|x| x.parse().unwrap()).collect())
        .collect();
    (header, rows)
}

/// The log's rows, and which holding register takes which column.
fn log_and_registers(map: &RegisterMap) -> (Vec<Vec<f64>>, [(u16, usize); 6]) {
    let (tags, rows) = log_rows();
    let tag = |t: &str| tags.iter().position(|h| h == t).unwrap();
    let inputs = [
        (map.inlet_flow_address(0), tag("FI-1")),
        (map.inlet_flow_address(1), tag("FI-2")),
        (map.feed_address(0, 0), tag("AI-1")),
        (map.outlet_flow_address(0), tag("FI-3")),
        (map.temperature_address(), tag("TI-1")),
        (map.level_address(), tag("LI-1")),
    ];
    (rows, inputs)
}

#[test]
fn sequence_clocked_ticks_agree_with_the_replay_bit_for_bit() {
    let plant = plant();
    let out = std::env::temp_dir().join(format!("holdup-serve-test-{}", std::process::id()));
    let req = replay::Request {
        plant: &plant,
        log: &fixture("log.csv"),
        lab: None,
        out_dir: &out,
        output_every_ms: 0,
        progress: false,
    };
    replay::run(&req).expect("the reference replay runs");
    let estimates = std::fs::read_to_string(out.join("estimates.csv")).unwrap();
    let _ = std::fs::remove_dir_all(&out);
    let mut rows = estimates.lines();
    let head: Vec<&str> = rows.next().unwrap().split(',').collect();
    let col = |name: &str| head.iter().position(|h| *h == name).unwrap();
    let (holdup_col, a_col) = (col("holdup_m3"), col("A_mol_m3"));

    let (server, map) = start(&plant, Clock::Sequence, AllowList::loopback());
    let mut c = Client::connect(server.local_addr());
    let (log, inputs) = log_and_registers(&map);
    // Serve tick k runs on log row k-1 and reads as estimates.csv row k.
    for (k, expected) in (1u16..=40).zip(rows.skip(1)) {
        let row = &log[usize::from(k) - 1];
        for (a, t) in inputs {
            c.write(a, &f32_words(row[t])).unwrap();
        }
        c.write(0, &[k]).unwrap();
        let regs = c.inputs(0, map.input_len()).unwrap();
        let fields: Vec<&str> = expected.split(',').collect();
        let f32_at = |a: u16| {
            let a = usize::from(a);
            WordOrder::HighFirst.join([regs[a], regs[a + 1]])
        };
        let want = |i: usize| fields[i].parse::<f32>().unwrap().to_bits();
        assert_eq!(f32_at(2), u32::from(k), "tick count");
        assert_eq!(
            f32_at(map.holdup_address()),
            want(holdup_col),
            "tick {k}: holdup against estimates.csv {}",
            fields[holdup_col]
        );
        assert_eq!(
            f32_at(map.concentration_address(0)),
            want(a_col),
            "tick {k}: A against estimates.csv {}",
            fields[a_col]
        );
    }
    server.stop();
}

#[test]
fn the_save_coil_writes_a_checkpoint_that_a_restart_restores() {
    use holdup_sim::serve::checkpoint::CheckpointFile;
    let plant = plant();
    let dir = std::env::temp_dir().join(format!("holdup-serve-ckpt-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join("sensor.ckpt");
    let _ = std::fs::remove_file(&path);
    let with_checkpoints = LinkSpec {
        checkpoints: true,
        ..spec(Clock::Sequence)
    };
    let mut first = link::build_for(&plant, with_checkpoints).unwrap();
    let (file, restored) = CheckpointFile::open(&path, first.as_mut()).unwrap();
    assert!(restored.is_none(), "no file yet");
    let map = *first.map();
    let options = ServeOptions {
        listen: "127.0.0.1:0".parse().unwrap(),
        read_only_listen: None,
        allow_write: AllowList::loopback(),
        idle_timeout: Duration::from_secs(5),
        max_clients: 8,
    };
    let server = Server::start(first, &options).unwrap();
    server.set_checkpoint(file);
    let mut c = Client::connect(server.local_addr());
    let (rows, inputs) = log_and_registers(&map);
    for (n, row) in rows.iter().take(20).enumerate() {
        for (a, t) in inputs {
            c.write(a, &f32_words(row[t])).unwrap();
        }
        if n == 10 {
            // Coil 1: save a checkpoint at the next tick.
            let mut req = c.request();
            let mut frame = Vec::new();
            req.generate_set_coil(1, 1u8, &mut frame).unwrap();
            let answer = c.exchange(&frame);
            req.parse_ok(&answer).unwrap();
        }
        c.write(0, &[n as u16 + 1]).unwrap();
    }
    let regs = c.inputs(0, map.input_len()).unwrap();
    // Link flag 6: the last checkpoint was saved.
    assert_ne!(regs[9] & (1 << 6), 0, "checkpoint saved flag");
    server.stop();
    // A restart restores the state saved at the 11th tick: 11 ticks run.
    let mut second = link::build_for(&plant, with_checkpoints).unwrap();
    let (_, restored) = CheckpointFile::open(&path, second.as_mut()).unwrap();
    assert_eq!(restored.map(|r| r.sequence), Some(1));
    second.write_holding(0, &[1]).unwrap();
    second.tick(0);
    let ticks =
        WordOrder::HighFirst.join([second.input_registers()[2], second.input_registers()[3]]);
    assert_eq!(ticks, 12, "11 restored, one more");
    // Another plant's file is refused, naming it.
    let mut other = plant.clone();
    other.tick_ms *= 2;
    let mut third = link::build_for(&other, with_checkpoints).unwrap();
    let err = CheckpointFile::open(&path, third.as_mut()).unwrap_err();
    assert!(err.contains("sensor.ckpt"), "{err}");
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn illegal_addresses_and_lengths_get_their_exceptions() {
    let plant = plant();
    let (server, map) = start(&plant, Clock::Sequence, AllowList::loopback());
    let mut c = Client::connect(server.local_addr());
    // Modbus Application Protocol v1.1b3, 7: 02 illegal data address.
    assert_eq!(
        c.inputs(map.input_len() - 1, 2),
        Err(ErrorKind::IllegalDataAddress)
    );
    // 03 illegal data value: a read of 0 registers (rmodbus's client
    // builds it; the specification allows 1 to 125).
    assert_eq!(c.inputs(0, 0), Err(ErrorKind::IllegalDataValue));
    assert_eq!(
        c.inputs(0, 2).map(|r| r[0]),
        Ok(1),
        "map version after them"
    );
    server.stop();
}

#[test]
fn writes_from_addresses_not_allowed_are_refused_with_01() {
    let plant = plant();
    let (server, map) = start(&plant, Clock::Sequence, AllowList::nobody());
    let mut c = Client::connect(server.local_addr());
    assert_eq!(
        c.write(map.level_address(), &f32_words(1.0)),
        Err(ErrorKind::IllegalFunction)
    );
    assert_eq!(c.write(0, &[1]), Err(ErrorKind::IllegalFunction));
    let ticks = c.inputs(2, 2).unwrap();
    assert_eq!(
        ticks,
        [0, 0],
        "no tick: the refused sequence was not applied"
    );
    server.stop();
}

#[test]
fn the_real_time_clock_ticks_on_time_while_a_client_says_nothing() {
    let plant = plant();
    let (server, _) = start(&plant, Clock::Free, AllowList::loopback());
    let started = std::time::Instant::now();
    // A client that connects and says nothing, and half a header.
    let _silent = TcpStream::connect(server.local_addr()).unwrap();
    let mut partial = TcpStream::connect(server.local_addr()).unwrap();
    partial.write_all(&[0, 1, 0]).unwrap();
    std::thread::sleep(Duration::from_millis(2_500));
    let mut c = Client::connect(server.local_addr());
    let regs = c.inputs(2, 2).unwrap();
    let elapsed = started.elapsed().as_secs_f64();
    let ticks = WordOrder::HighFirst.join([regs[0], regs[1]]);
    // Ticks are due at 0, 1, 2, … s (the fixture's tick is 1 s): after
    // `elapsed` s, floor(elapsed) + 1 of them (one less if the read came
    // just before a tick ran).
    let due = elapsed.floor() as u32 + 1;
    assert!(
        ticks == due || ticks + 1 == due,
        "{ticks} ticks after {elapsed:.3} s"
    );
    let stats = &server.shared().stats;
    assert_eq!(
        stats.late_ticks.load(std::sync::atomic::Ordering::Relaxed),
        0
    );
    server.stop();
}
