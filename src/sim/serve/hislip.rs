//! The served instrument over HiSLIP 2.0 (IVI-6.1), synchronized mode: each connection opens
//! with Initialize (a synchronous channel, given a new session id) or AsyncInitialize (the
//! asynchronous channel of a session already opened); anything else first is a FatalError
//! "invalid initialization sequence". On the synchronous channel Data/DataEND build a message,
//! which is carried out at DataEND and answered with one DataEND bearing that message's id;
//! DeviceClearComplete is acknowledged. On the asynchronous channel: maximum message size,
//! device clear, the exclusive lock (a message from another session waits up to 10 s for its
//! release, else is refused unrun), lock info, remote/local and status queries (answered once
//! the synchronous channel has dealt with the messages sent before the query, up to 2 s). Other message
//! types get an Error, a malformed header a FatalError and the end of that connection only.
//! TLS (StartTLS, §6.16 ff.) and credentials are not offered.

use super::message_device::MessageDevice;
use crate::instrument::transport::hislip::message::{
    self, error, fatal, Kind, Message, ReadError, FIRST_MESSAGE_ID, MAX_PAYLOAD_BYTES,
    PROTOCOL_VERSION, VENDOR_ID,
};
use std::collections::{HashMap, HashSet};
use std::sync::atomic::{AtomicU16, Ordering};
use std::sync::{Arc, Mutex};
use std::time::Duration;
use tokio::io::{AsyncRead, AsyncWrite, AsyncWriteExt, BufReader};
use tokio::sync::{Notify, OwnedSemaphorePermit, Semaphore};

/// How long a message from a session without the exclusive lock waits for another session to
/// release it.
const LOCKED_OUT_WAIT: Duration = Duration::from_secs(10);

/// How long a status query waits for the synchronous channel to carry out the messages sent
/// before it; past that it answers with the status byte as it stands.
const STATUS_ORDER_WAIT: Duration = Duration::from_secs(2);

/// The sessions of one served instrument: their ids, and who holds the exclusive lock.
#[derive(Default)]
pub struct Sessions {
    open: Mutex<HashSet<u16>>,
    next: AtomicU16,
    holder: Mutex<Option<u16>>,
    released: Notify,
    /// Per session, the message id after the last one the synchronous channel has dealt with.
    done: Mutex<HashMap<u16, u32>>,
    progressed: Notify,
}

impl Sessions {
    fn start(&self) -> u16 {
        let id = self.next.fetch_add(1, Ordering::Relaxed).wrapping_add(1);
        if let Ok(mut open) = self.open.lock() {
            open.insert(id);
        }
        id
    }

    fn is_open(&self, id: u16) -> bool {
        self.open.lock().is_ok_and(|o| o.contains(&id))
    }

    fn end(&self, id: u16) {
        if let Ok(mut open) = self.open.lock() {
            open.remove(&id);
        }
        if let Ok(mut done) = self.done.lock() {
            done.remove(&id);
        }
        self.release(id);
    }

    /// Records that session `id`'s synchronous channel has dealt with every message before
    /// `next` (a message id; ids go up by 2 and wrap).
    fn dealt_with(&self, id: u16, next: u32) {
        if let Ok(mut done) = self.done.lock() {
            done.insert(id, next);
        }
        self.progressed.notify_waiters();
    }

    /// Waits up to `wait` until session `id` has dealt with every message before `next`, so a
    /// status query sent after a message reflects it (the client sends its next message id).
    async fn caught_up(&self, id: u16, next: u32, wait: Duration) {
        until(&self.progressed, wait, || {
            let reached = self.done.lock().is_ok_and(|done| {
                let at = done.get(&id).copied().unwrap_or(FIRST_MESSAGE_ID);
                // At or past `next`, modulo the wrap: within half the id space ahead.
                at.wrapping_sub(next) < 1 << 31
            });
            reached.then_some(true)
        })
        .await;
    }

    async fn lock(&self, id: u16, wait: Duration) -> bool {
        until(&self.released, wait, || match self.holder.lock() {
            Ok(mut h) if h.is_none_or(|h| h == id) => {
                *h = Some(id);
                Some(true)
            }
            Ok(_) => None,
            Err(_) => Some(false),
        })
        .await
    }

    /// Waits up to `wait` until no other session holds the exclusive lock; whether none does.
    async fn free_for(&self, id: u16, wait: Duration) -> bool {
        until(&self.released, wait, || match self.holder.lock() {
            Ok(h) if h.is_none_or(|h| h == id) => Some(true),
            Ok(_) => None,
            Err(_) => Some(false),
        })
        .await
    }

    fn release(&self, id: u16) -> bool {
        match self.holder.lock() {
            Ok(mut h) if *h == Some(id) => {
                *h = None;
                self.released.notify_waiters();
                true
            }
            _ => false,
        }
    }

    fn locked(&self) -> bool {
        self.holder.lock().is_ok_and(|h| h.is_some())
    }
}

/// Asks `settled` now and each time `notify` fires, up to `wait`: its answer once it gives
/// one, `false` at the deadline. Armed before each asking, so a notification between the
/// asking and the wait is not missed.
async fn until(notify: &Notify, wait: Duration, mut settled: impl FnMut() -> Option<bool>) -> bool {
    let deadline = tokio::time::Instant::now() + wait;
    loop {
        let notified = notify.notified();
        tokio::pin!(notified);
        notified.as_mut().enable();
        if let Some(answer) = settled() {
            return answer;
        }
        if tokio::time::timeout_at(deadline, notified).await.is_err() {
            return false;
        }
    }
}

async fn send<S: AsyncWrite + Unpin>(stream: &mut S, m: Message) -> std::io::Result<()> {
    stream.write_all(&m.encode()).await
}

async fn fatal_error<S: AsyncWrite + Unpin>(
    stream: &mut S,
    code: u8,
    text: &str,
) -> std::io::Result<()> {
    send(
        stream,
        Message::new(Kind::FatalError, code, 0, text.as_bytes().to_vec()),
    )
    .await
}

/// The next message from the client; `None` where the client has closed the connection, or
/// sent a header not to be read, which is answered with a fatal error first.
async fn next_message<S: AsyncRead + AsyncWrite + Unpin>(
    stream: &mut S,
) -> std::io::Result<Option<Message>> {
    match message::read(stream).await {
        Ok(m) => Ok(m),
        Err(ReadError::Header(e)) => fatal_error(stream, fatal::BAD_HEADER, &e.to_string())
            .await
            .map(|()| None),
        Err(ReadError::Io(e)) => Err(e),
    }
}

/// Serves one connection until it closes. `clients` caps the synchronous channels open at once
/// (a client past it is told so with FatalError 4).
pub async fn serve<S: AsyncRead + AsyncWrite + Unpin, D: MessageDevice>(
    stream: S,
    device: Arc<D>,
    sessions: Arc<Sessions>,
    clients: Arc<Semaphore>,
) -> std::io::Result<()> {
    // Header and payload come through a buffer: one read for a message, not two.
    let mut stream = BufReader::new(stream);
    let first = match message::read(&mut stream).await {
        Ok(Some(m)) => m,
        Ok(None) => return Ok(()),
        Err(ReadError::Header(e)) => {
            return fatal_error(&mut stream, fatal::BAD_HEADER, &e.to_string()).await
        }
        Err(ReadError::Io(e)) => return Err(e),
    };
    match first.kind() {
        Some(Kind::Initialize) => {
            let Ok(permit) = clients.try_acquire_owned() else {
                return fatal_error(
                    &mut stream,
                    fatal::TOO_MANY_CLIENTS,
                    "the instrument serves no more clients",
                )
                .await;
            };
            let sub_address = String::from_utf8_lossy(&first.payload).into_owned();
            let known = sub_address.is_empty()
                || sub_address
                    .strip_prefix("hislip")
                    .is_some_and(|n| !n.is_empty() && n.chars().all(|c| c.is_ascii_digit()));
            if !known {
                return fatal_error(
                    &mut stream,
                    fatal::BAD_INITIALIZATION,
                    &format!("no sub-address `{sub_address}` here (hislip0)"),
                )
                .await;
            }
            let id = sessions.start();
            let outcome = synchronous(&mut stream, device, &sessions, id, permit).await;
            sessions.end(id);
            outcome
        }
        Some(Kind::AsyncInitialize) => {
            let id = first.parameter as u16;
            if !sessions.is_open(id) {
                return fatal_error(&mut stream, fatal::BAD_INITIALIZATION, "no such session")
                    .await;
            }
            send(
                &mut stream,
                Message::new(
                    Kind::AsyncInitializeResponse,
                    0,
                    u32::from(VENDOR_ID),
                    Vec::new(),
                ),
            )
            .await?;
            let outcome = asynchronous(&mut stream, device, &sessions, id).await;
            sessions.release(id);
            outcome
        }
        _ => {
            fatal_error(
                &mut stream,
                fatal::BAD_INITIALIZATION,
                "a connection opens with Initialize or AsyncInitialize",
            )
            .await
        }
    }
}

async fn synchronous<S: AsyncRead + AsyncWrite + Unpin, D: MessageDevice>(
    stream: &mut S,
    device: Arc<D>,
    sessions: &Sessions,
    id: u16,
    _permit: OwnedSemaphorePermit,
) -> std::io::Result<()> {
    send(
        stream,
        Message::new(
            Kind::InitializeResponse,
            0,
            (u32::from(PROTOCOL_VERSION) << 16) | u32::from(id),
            Vec::new(),
        ),
    )
    .await?;
    let mut pending = Vec::new();
    // Set when a message outgrew the limit, until its DataEND: none of it may run, not even
    // its tail, which could be a setting cut short.
    let mut discarding = false;
    loop {
        let Some(m) = next_message(stream).await? else {
            return Ok(());
        };
        match m.kind() {
            Some(Kind::Data) | Some(Kind::DataEnd) => {
                let end = m.kind() == Some(Kind::DataEnd);
                if discarding {
                    discarding = !end;
                } else if pending.len() + m.payload.len() > MAX_PAYLOAD_BYTES as usize {
                    pending.clear();
                    discarding = !end;
                    send(
                        stream,
                        Message::new(
                            Kind::Error,
                            error::TOO_LARGE,
                            0,
                            b"message too large".to_vec(),
                        ),
                    )
                    .await?;
                } else {
                    pending.extend_from_slice(&m.payload);
                    if end {
                        let program = std::mem::take(&mut pending);
                        if !carry_out(stream, &*device, sessions, id, &program, m.parameter).await?
                        {
                            return Ok(());
                        }
                    }
                }
                // Status queries wait for this: the client sends its next message id.
                sessions.dealt_with(id, m.parameter.wrapping_add(2));
            }
            Some(Kind::DeviceClearComplete) => {
                pending.clear();
                discarding = false;
                // After a device clear the client numbers its messages from the first id again.
                sessions.dealt_with(id, FIRST_MESSAGE_ID);
                // Synchronized mode is all this server offers: no overlap feature granted.
                send(
                    stream,
                    Message::new(Kind::DeviceClearAcknowledge, 0, 0, Vec::new()),
                )
                .await?;
            }
            Some(Kind::Trigger) => sessions.dealt_with(id, m.parameter.wrapping_add(2)),
            _ => {
                send(
                    stream,
                    Message::new(
                        Kind::Error,
                        error::UNRECOGNIZED_TYPE,
                        0,
                        format!(
                            "message type {} is not taken on the synchronous channel",
                            m.kind
                        )
                        .into_bytes(),
                    ),
                )
                .await?
            }
        }
    }
}

/// Carries out one whole message for session `id` and sends its response, if any; `false`
/// when the device is gone. The exclusive lock keeps other sessions out: their message waits
/// for its release, and is refused unrun if that does not come in time.
async fn carry_out<S: AsyncWrite + Unpin, D: MessageDevice>(
    stream: &mut S,
    device: &D,
    sessions: &Sessions,
    id: u16,
    program: &[u8],
    message_id: u32,
) -> std::io::Result<bool> {
    if !sessions.free_for(id, LOCKED_OUT_WAIT).await {
        send(
            stream,
            Message::new(
                Kind::Error,
                error::UNIDENTIFIED,
                0,
                b"locked by another session: the message was not carried out".to_vec(),
            ),
        )
        .await?;
        return Ok(true);
    }
    let Some(response) = device.execute(program).await else {
        return Ok(false);
    };
    if !response.is_empty() {
        // Synchronized mode: the response bears the id of the DataEND it answers.
        send(stream, Message::new(Kind::DataEnd, 0, message_id, response)).await?;
    }
    Ok(true)
}

async fn asynchronous<S: AsyncRead + AsyncWrite + Unpin, D: MessageDevice>(
    stream: &mut S,
    device: Arc<D>,
    sessions: &Sessions,
    id: u16,
) -> std::io::Result<()> {
    loop {
        let Some(m) = next_message(stream).await? else {
            return Ok(());
        };
        let answer = match m.kind() {
            Some(Kind::AsyncMaximumMessageSize) => Message::new(
                Kind::AsyncMaximumMessageSizeResponse,
                0,
                0,
                MAX_PAYLOAD_BYTES.to_be_bytes().to_vec(),
            ),
            Some(Kind::AsyncDeviceClear) => {
                Message::new(Kind::AsyncDeviceClearAcknowledge, 0, 0, Vec::new())
            }
            Some(Kind::AsyncLock) if m.control == 1 => {
                let granted = sessions
                    .lock(id, Duration::from_millis(u64::from(m.parameter)))
                    .await;
                Message::new(Kind::AsyncLockResponse, u8::from(granted), 0, Vec::new())
            }
            Some(Kind::AsyncLock) => {
                // Releasing a lock not held is an error (control code 3).
                let code = if sessions.release(id) { 1 } else { 3 };
                Message::new(Kind::AsyncLockResponse, code, 0, Vec::new())
            }
            Some(Kind::AsyncLockInfo) => {
                let locked = sessions.locked();
                Message::new(
                    Kind::AsyncLockInfoResponse,
                    u8::from(locked),
                    u32::from(locked),
                    Vec::new(),
                )
            }
            Some(Kind::AsyncRemoteLocalControl) => {
                Message::new(Kind::AsyncRemoteLocalResponse, 0, 0, Vec::new())
            }
            Some(Kind::AsyncStatusQuery) => {
                // The status byte as it stands after the messages sent before the query.
                sessions.caught_up(id, m.parameter, STATUS_ORDER_WAIT).await;
                Message::new(
                    Kind::AsyncStatusResponse,
                    device.status_byte(),
                    0,
                    Vec::new(),
                )
            }
            _ => Message::new(
                Kind::Error,
                error::UNRECOGNIZED_TYPE,
                0,
                format!(
                    "message type {} is not taken on the asynchronous channel",
                    m.kind
                )
                .into_bytes(),
            ),
        };
        send(stream, answer).await?;
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use async_trait::async_trait;

    /// Records every program it is given; answers each with `ok`.
    #[derive(Default)]
    struct Recorder(Mutex<Vec<Vec<u8>>>);

    #[async_trait]
    impl MessageDevice for Recorder {
        async fn execute(&self, message: &[u8]) -> Option<Vec<u8>> {
            self.0.lock().expect("recorder").push(message.to_vec());
            Some(b"ok\n".to_vec())
        }
        fn status_byte(&self) -> u8 {
            0
        }
    }

    async fn next<S: AsyncRead + Unpin>(s: &mut S) -> Message {
        message::read(s).await.expect("read").expect("a message")
    }

    #[tokio::test]
    async fn no_part_of_an_oversize_message_is_carried_out() {
        let device = Arc::new(Recorder::default());
        let (mut client, server) = tokio::io::duplex(1 << 16);
        let serving = tokio::spawn(serve(
            server,
            device.clone(),
            Arc::new(Sessions::default()),
            Arc::new(Semaphore::new(1)),
        ));
        let hello = Message::new(Kind::Initialize, 0, 0, b"hislip0".to_vec());
        client.write_all(&hello.encode()).await.expect("init");
        assert_eq!(
            next(&mut client).await.kind(),
            Some(Kind::InitializeResponse)
        );
        // Three chunks past MAX_PAYLOAD_BYTES in all; the last alone is a valid setting.
        let big = vec![b' '; MAX_PAYLOAD_BYTES as usize - 8];
        for m in [
            Message::new(Kind::Data, 0, 1, big),
            Message::new(Kind::Data, 0, 1, vec![b' '; 64]),
            Message::new(Kind::DataEnd, 0, 1, b"ATT 10\n".to_vec()),
            Message::new(Kind::DataEnd, 0, 3, b"*IDN?\n".to_vec()),
        ] {
            client.write_all(&m.encode()).await.expect("send");
        }
        let refused = next(&mut client).await;
        assert_eq!(refused.kind(), Some(Kind::Error));
        assert_eq!(refused.control, error::TOO_LARGE);
        let answer = next(&mut client).await;
        assert_eq!((answer.kind(), answer.parameter), (Some(Kind::DataEnd), 3));
        assert_eq!(*device.0.lock().expect("recorder"), [b"*IDN?\n".to_vec()]);
        drop(client);
        serving.await.expect("join").expect("served");
    }

    /// Takes a while over each message; its status byte says a message was carried out.
    #[derive(Default)]
    struct Slow(std::sync::atomic::AtomicU8);

    #[async_trait]
    impl MessageDevice for Slow {
        async fn execute(&self, _message: &[u8]) -> Option<Vec<u8>> {
            tokio::time::sleep(Duration::from_millis(300)).await;
            // Bit 2, the error/event queue (SCPI), as a bad command leaves it.
            self.0.store(4, Ordering::SeqCst);
            Some(Vec::new())
        }
        fn status_byte(&self) -> u8 {
            self.0.load(Ordering::SeqCst)
        }
    }

    #[tokio::test]
    async fn a_status_query_reflects_the_messages_sent_before_it() {
        let device = Arc::new(Slow::default());
        let sessions = Arc::new(Sessions::default());
        let permits = Arc::new(Semaphore::new(2));
        let (mut sync, server) = tokio::io::duplex(1 << 16);
        let serving = tokio::spawn(serve(
            server,
            device.clone(),
            sessions.clone(),
            permits.clone(),
        ));
        let hello = Message::new(Kind::Initialize, 0, 0, b"hislip0".to_vec());
        sync.write_all(&hello.encode()).await.expect("init");
        let session = next(&mut sync).await.parameter as u16;
        let (mut asynchronous, server) = tokio::io::duplex(1 << 16);
        let serving_async = tokio::spawn(serve(server, device.clone(), sessions, permits));
        let hello = Message::new(Kind::AsyncInitialize, 0, u32::from(session), Vec::new());
        asynchronous
            .write_all(&hello.encode())
            .await
            .expect("async init");
        assert_eq!(
            next(&mut asynchronous).await.kind(),
            Some(Kind::AsyncInitializeResponse)
        );
        // The query goes out at once after the message, bearing the next message id (as
        // pyvisa-py sends it); the device takes 300 ms over the message.
        let bad = Message::new(Kind::DataEnd, 0, FIRST_MESSAGE_ID, b"BAD:CMD 1\n".to_vec());
        sync.write_all(&bad.encode()).await.expect("send");
        let ask = Message::new(
            Kind::AsyncStatusQuery,
            0,
            FIRST_MESSAGE_ID.wrapping_add(2),
            Vec::new(),
        );
        asynchronous.write_all(&ask.encode()).await.expect("ask");
        let status = next(&mut asynchronous).await;
        assert_eq!(status.kind(), Some(Kind::AsyncStatusResponse));
        assert_eq!(
            status.control, 4,
            "the status byte before the message was carried out"
        );
        drop((sync, asynchronous));
        serving.await.expect("join").expect("served");
        serving_async.await.expect("join").expect("served");
    }
}
