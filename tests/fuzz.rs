//! Property-based fuzzing of every parser that reads user files: random edits of valid files
//! (byte flips, deletions, insertions of TOML/CSV punctuation, truncation) must end in `Ok` or a
//! located error, never a panic; the error's rendering must name the file. Case counts are the
//! figures quoted in the README.

use proptest::prelude::*;
use std::path::Path;
use taucal::bench::Bench;
use taucal::diagnostic::SourceFile;

const CASES: u32 = 4000;

/// An edit of a text: replace, delete or insert at a position, or cut the text short.
fn mutate(text: &str, edits: &[(u8, usize, u8)]) -> String {
    const PUNCT: &[u8] = b"[]{}=\"',.#\n-0123456789$ ";
    let mut b: Vec<u8> = text.as_bytes().to_vec();
    for &(kind, pos, ch) in edits {
        if b.is_empty() {
            break;
        }
        let at = pos % b.len();
        let c = PUNCT[ch as usize % PUNCT.len()];
        match kind % 4 {
            0 => b[at] = c,
            1 => {
                b.remove(at);
            }
            2 => b.insert(at, c),
            _ => b.truncate(at),
        }
    }
    String::from_utf8_lossy(&b).into_owned()
}

fn read(rel: &str) -> String {
    std::fs::read_to_string(Path::new(env!("CARGO_MANIFEST_DIR")).join(rel)).expect(rel)
}

fn edits() -> impl Strategy<Value = Vec<(u8, usize, u8)>> {
    proptest::collection::vec((any::<u8>(), any::<usize>(), any::<u8>()), 1..6)
}

proptest! {
    #![proptest_config(ProptestConfig { cases: CASES, failure_persistence: None, ..ProptestConfig::default() })]

    #[test]
    fn recipe_parser_never_panics(e in edits()) {
        let bench = Bench::built_in().expect("demo bench");
        let text = mutate(&read("recipes/rx-gain-sweep.toml"), &e);
        if let Err(d) = taucal::recipe::parse(SourceFile::new("r.toml", text), &[], &bench, Path::new(".")) {
            prop_assert!(d.to_string().starts_with("taucal: "));
        }
    }

    #[test]
    fn bench_parser_never_panics(e in edits()) {
        let text = mutate(&read("recipes/benches/overnight-soak.toml"), &e);
        if let Err(d) = Bench::parse(SourceFile::new("b.toml", text)) {
            prop_assert!(d.to_string().contains("b.toml"));
        }
    }

    #[test]
    fn driver_file_parser_never_panics(e in edits(), chamber in any::<bool>()) {
        let file = if chamber { "drivers/tillowby-coldhearth60.toml" } else { "drivers/wren6-console.toml" };
        let text = mutate(&read(file), &e);
        if let Err(d) = taucal::instrument::driver_file::DriverFile::parse("d", SourceFile::new("d.toml", text)) {
            prop_assert!(d.to_string().contains("d.toml"), "{}", d);
        }
    }

    #[test]
    fn exchanges_reader_never_panics(e in edits()) {
        let header = taucal::data::EXCHANGES_HEADER.join(",");
        let text = mutate(&format!("{header}\nsweep,0,0,0,40,5180,80,1,2,3,4,0,-40.5,0,25.0,ok\nsweep,0,0,1,40,5180,80,5,6,7,9,1,,0,,lost\n"), &e);
        let errors: Vec<String> = match taucal::data::csv_io::read_from(text.as_bytes(), "e.csv".into()) {
            Ok(rows) => rows.filter_map(Result::err).map(|e| e.to_string()).collect(),
            Err(e) => vec![e.to_string()],
        };
        for err in errors {
            prop_assert!(err.starts_with("e.csv"), "{}", err);
        }
    }

    #[test]
    fn ranges_reader_never_panics(e in edits()) {
        let text = mutate("distance_mm,true_m,status\n1005,1.0,ok\n2011,2.0,ok\nnan,3.0,fail\n", &e);
        let _ = taucal::fit::ota::read_ranges(&text, "distance_mm", "true_m");
    }

    #[test]
    fn pairs_reader_never_panics(e in edits()) {
        let text = mutate("unit_a,unit_b,sum_ps,se_ps\nA,B,5000,10\nB,C,5200,10\nA,C,5100,12\n", &e);
        let _ = taucal::fit::pairs::read_pairs(&text);
    }
}

/// The instrument-protocol decoders and servers (VXI-11's ONC RPC records, RFC 5531 §11 and
/// RFC 4506; HiSLIP's messages, IVI-6.1 §3.1) take bytes from the network: valid messages with
/// random fields and random byte edits must end in a reply, an error or a closed connection,
/// never a panic. Servers run on a paused clock, so a wait a record asks for costs nothing.
mod wire {
    use super::CASES;
    use proptest::prelude::*;
    use std::sync::Arc;
    use taucal::instrument::transport::hislip::message::{self, Kind, Message};
    use taucal::instrument::transport::vxi11::core::{self as vxi, proc_num};
    use taucal::instrument::transport::vxi11::rpc;
    use taucal::instrument::transport::vxi11::xdr::Decoder;
    use taucal::sim::serve::message_device::MessageDevice;
    use taucal::sim::serve::{hislip, vxi11};
    use tokio::io::AsyncWriteExt;

    /// Echoes each message, as an instrument that answers everything.
    struct Echo;

    #[async_trait::async_trait]
    impl MessageDevice for Echo {
        async fn execute(&self, message: &[u8]) -> Option<Vec<u8>> {
            Some(message.to_vec())
        }
        fn status_byte(&self) -> u8 {
            0
        }
    }

    fn edited(mut bytes: Vec<u8>, edits: &[(usize, u8, u8)]) -> Vec<u8> {
        for &(at, value, kind) in edits {
            if bytes.is_empty() {
                break;
            }
            let at = at % bytes.len();
            match kind % 3 {
                0 => bytes[at] = value,
                1 => {
                    bytes.remove(at);
                }
                _ => bytes.truncate(at),
            }
        }
        bytes
    }

    /// A core-channel call record of a random procedure with random argument words.
    fn vxi11_record(xid: u32, procedure: u32, words: &[u32], data: &[u8]) -> Vec<u8> {
        let mut e = rpc::call_header(xid, vxi::DEVICE_CORE, vxi::DEVICE_CORE_VERSION, procedure);
        for w in words {
            e.u32(*w);
        }
        e.opaque(data);
        rpc::finish_record(e)
    }

    /// One call on `client` and its reply's results (`None`: no reply, or not accepted).
    async fn vxi11_call(
        client: &mut tokio::io::DuplexStream,
        xid: u32,
        procedure: u32,
        args: impl FnOnce(&mut taucal::instrument::transport::vxi11::xdr::Encoder),
    ) -> Option<Vec<u8>> {
        let mut e = rpc::call_header(xid, vxi::DEVICE_CORE, vxi::DEVICE_CORE_VERSION, procedure);
        args(&mut e);
        client.write_all(&rpc::finish_record(e)).await.ok()?;
        let record = rpc::read_record(client).await.ok()??;
        rpc::decode_reply(&record, xid).ok().map(<[u8]>::to_vec)
    }

    /// A well-behaved client on a connection of its own, to a server sharing `links` with the
    /// connections before it: create_link, `*IDN?` written with END, then read back whole
    /// (VXI-11 §B.6.3, §B.6.11, §B.6.12). True when the echo came back.
    async fn vxi11_still_serves(links: Arc<vxi11::Links>) -> bool {
        let (mut client, server) = tokio::io::duplex(1 << 16);
        let serving = tokio::spawn(vxi11::serve_core(server, Arc::new(Echo), links));
        let create = vxi::CreateLink {
            client_id: 7,
            lock_device: false,
            lock_timeout_ms: 0,
            device: "inst0".into(),
        };
        let answered = async {
            let results =
                vxi11_call(&mut client, 1, proc_num::CREATE_LINK, |e| create.encode(e)).await?;
            let created = vxi::LinkCreated::decode(&mut Decoder::new(&results)).ok()?;
            if created.error != 0 {
                return None;
            }
            let write = vxi::Write {
                lid: created.lid,
                io_timeout_ms: 1000,
                lock_timeout_ms: 0,
                flags: vxi::flags::END,
                data: b"*IDN?\n",
            };
            let results =
                vxi11_call(&mut client, 2, proc_num::DEVICE_WRITE, |e| write.encode(e)).await?;
            if Decoder::new(&results).i32().ok()? != 0 {
                return None;
            }
            let read = vxi::Read {
                lid: created.lid,
                request_size: 1024,
                io_timeout_ms: 1000,
                lock_timeout_ms: 0,
                flags: 0,
                term_char: 0,
            };
            let results =
                vxi11_call(&mut client, 3, proc_num::DEVICE_READ, |e| read.encode(e)).await?;
            let got = vxi::ReadResult::decode(&mut Decoder::new(&results)).ok()?;
            Some(got.error == 0 && got.reason & vxi::reason::END != 0 && got.data == b"*IDN?\n")
        }
        .await
        .unwrap_or(false);
        drop(client);
        answered && serving.await.is_ok()
    }

    /// A well-behaved HiSLIP client on a connection of its own: Initialize, then `*IDN?` in a
    /// DataEND whose response must bear its message id (IVI-6.1 §6.1, §3.1.2).
    async fn hislip_still_serves(
        sessions: Arc<hislip::Sessions>,
        clients: Arc<tokio::sync::Semaphore>,
    ) -> bool {
        let (mut client, server) = tokio::io::duplex(1 << 16);
        let serving = tokio::spawn(hislip::serve(server, Arc::new(Echo), sessions, clients));
        let answered = async {
            let hello = Message::new(Kind::Initialize, 0, 0x0200_0000, b"hislip0".to_vec());
            client.write_all(&hello.encode()).await.ok()?;
            let response = message::read(&mut client).await.ok()??;
            if response.kind() != Some(Kind::InitializeResponse) {
                return None;
            }
            let query = Message::new(Kind::DataEnd, 0, 0xFFFF_FF00, b"*IDN?\n".to_vec());
            client.write_all(&query.encode()).await.ok()?;
            let back = message::read(&mut client).await.ok()??;
            Some(
                back.kind() == Some(Kind::DataEnd)
                    && back.parameter == 0xFFFF_FF00
                    && back.payload == b"*IDN?\n",
            )
        }
        .await
        .unwrap_or(false);
        drop(client);
        answered && serving.await.is_ok()
    }

    fn paused() -> tokio::runtime::Runtime {
        tokio::runtime::Builder::new_current_thread()
            .enable_time()
            .start_paused(true)
            .build()
            .expect("runtime")
    }

    proptest! {
        #![proptest_config(ProptestConfig { cases: CASES, failure_persistence: None, ..ProptestConfig::default() })]

        #[test]
        fn rpc_and_vxi11_decoders_never_panic(bytes in proptest::collection::vec(any::<u8>(), 0..120)) {
            let _ = rpc::decode_call(&bytes);
            let _ = rpc::decode_reply(&bytes, 1);
            let _ = vxi::CreateLink::decode(&mut Decoder::new(&bytes));
            let _ = vxi::Write::decode(&mut Decoder::new(&bytes));
            let _ = vxi::Read::decode(&mut Decoder::new(&bytes));
            let _ = vxi::ReadResult::decode(&mut Decoder::new(&bytes));
            let _ = vxi::Generic::decode(&mut Decoder::new(&bytes));
            let _ = vxi::Lock::decode(&mut Decoder::new(&bytes));
            let _ = vxi11::portmapper_reply(&bytes, 1);
        }

        #[test]
        fn the_vxi11_server_survives_any_records(
            calls in proptest::collection::vec((10u32..27, proptest::collection::vec(any::<u32>(), 0..6), proptest::collection::vec(any::<u8>(), 0..12)), 1..6),
            edits in proptest::collection::vec((any::<usize>(), any::<u8>(), any::<u8>()), 0..4),
            lid_hint in 0u32..3,
            lock_with_link in any::<bool>(),
        ) {
            // A link made properly first (taking the lock or not), so the calls after it reach
            // past the link check: link ids here count from 1.
            let mut e = rpc::call_header(1, vxi::DEVICE_CORE, vxi::DEVICE_CORE_VERSION, proc_num::CREATE_LINK);
            vxi::CreateLink { client_id: 1, lock_device: lock_with_link, lock_timeout_ms: 0, device: "inst0".into() }.encode(&mut e);
            let mut wire = rpc::finish_record(e);
            for (i, (procedure, words, data)) in calls.iter().enumerate() {
                let mut words = words.clone();
                if let Some(first) = words.first_mut() {
                    // Often a real link id, so calls get past the link check.
                    if lid_hint > 0 { *first = lid_hint; }
                }
                wire.extend(vxi11_record(i as u32 + 2, *procedure, &words, data));
            }
            let wire = edited(wire, &edits);
            paused().block_on(async {
                let links = Arc::new(vxi11::Links::default());
                let (mut client, server) = tokio::io::duplex(1 << 16);
                let serving = tokio::spawn(vxi11::serve_core(server, Arc::new(Echo), links.clone()));
                let _ = client.write_all(&wire).await;
                drop(client);
                assert!(serving.await.is_ok(), "the server task did not panic");
                // Whatever that client locked or left half-written, the next one is served.
                assert!(vxi11_still_serves(links).await, "a later client is served");
            });
        }

        #[test]
        fn hislip_messages_never_panic_the_reader_or_the_server(
            messages in proptest::collection::vec((0u8..30, any::<u8>(), any::<u32>(), proptest::collection::vec(any::<u8>(), 0..10)), 0..6),
            edits in proptest::collection::vec((any::<usize>(), any::<u8>(), any::<u8>()), 0..4),
            asynchronous in any::<bool>(),
        ) {
            let mut wire = if asynchronous {
                Message::new(Kind::AsyncInitialize, 0, 1, Vec::new()).encode()
            } else {
                Message::new(Kind::Initialize, 0, 0x0200_0000, b"hislip0".to_vec()).encode()
            };
            for (kind, control, parameter, payload) in &messages {
                wire.extend(Message { kind: *kind, control: *control, parameter: *parameter, payload: payload.clone() }.encode());
            }
            let wire = edited(wire, &edits);
            paused().block_on(async {
                let mut reader = &wire[..];
                while let Ok(Some(_)) = message::read(&mut reader).await {}
                let sessions = Arc::new(hislip::Sessions::default());
                let clients = Arc::new(tokio::sync::Semaphore::new(4));
                // A session for the asynchronous channel to join.
                let (mut opener, opened) = tokio::io::duplex(1 << 12);
                let first = tokio::spawn(hislip::serve(opened, Arc::new(Echo), sessions.clone(), clients.clone()));
                let _ = opener.write_all(&Message::new(Kind::Initialize, 0, 0x0200_0000, b"hislip0".to_vec()).encode()).await;
                tokio::task::yield_now().await;
                let (mut client, server) = tokio::io::duplex(1 << 16);
                let serving = tokio::spawn(hislip::serve(server, Arc::new(Echo), sessions.clone(), clients.clone()));
                let _ = client.write_all(&wire).await;
                drop(client);
                assert!(serving.await.is_ok(), "the server task did not panic");
                assert!(hislip_still_serves(sessions.clone(), clients.clone()).await, "a later client is served");
                drop(opener);
                assert!(first.await.is_ok());
            });
        }
    }
}
