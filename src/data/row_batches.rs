//! Handing rows from the reading thread to the caller, a batch at a time.
//!
//! The reading thread reads, splits and parses; the caller takes rows out of the batch it holds
//! and sends each finished batch back to be refilled, so rows are allocated once. Labels are
//! what makes a slot costly to fill: a slot comes back holding the labels of a row a few
//! thousand rows past, so writing the current ones into every slot was a copy per label per row
//! (a tenth of the reading thread's work). A slot holds its labels only where they differ from
//! the row before; the caller keeps the current ones.

use super::Exchange;
use std::sync::mpsc;

/// Rows the reading thread hands over at a time. A waiting thread is woken about once per
/// batch: at 1024 rows a 2M-row fit switched context ~1800 times and took ~10 % longer than at
/// 4096 (~300 switches).
const BATCH_ROWS: usize = 4096;

/// Full batches waiting for the caller: bounds what the reading thread may run ahead (about
/// 1.5 MB), so memory never follows the file's size.
const BATCHES_AHEAD: usize = 2;

/// Where a row's stage and status are once it is read.
pub(crate) enum Labels {
    /// In the row.
    InRow,
    /// With the reader (see [`RowSource::labels`]), as they were for earlier rows if the
    /// version is the same.
    Kept(u64),
}

/// What the reading thread reads rows from.
pub(crate) trait RowSource<E> {
    /// Reads the next row's numbers into `row`, and its labels into `row` or keeps them;
    /// `None` at the end.
    fn read_next(&mut self, row: &mut Exchange) -> Result<Option<Labels>, E>;

    /// The labels last kept: stage and status.
    fn labels(&self) -> (&str, &str);
}

/// Rows parsed by the reading thread: `rows[..filled]`, then `error` if reading failed there
/// (the thread stops after an error or the end of the file). Where `labelled[i]` is set,
/// `rows[i]` holds its stage and status, and the rows after it up to the next such row share
/// them; elsewhere a slot's labels are stale.
struct Batch<E> {
    rows: Vec<Exchange>,
    labelled: Vec<bool>,
    filled: usize,
    error: Option<E>,
}

impl<E> Batch<E> {
    fn new() -> Self {
        Batch {
            rows: vec![Exchange::default(); BATCH_ROWS],
            labelled: vec![false; BATCH_ROWS],
            filled: 0,
            error: None,
        }
    }
}

/// The caller's end of the reading thread.
pub(crate) struct Batches<E> {
    full: mpsc::Receiver<Batch<E>>,
    recycle: mpsc::Sender<Batch<E>>,
    current: Batch<E>,
    next: usize,
    /// The labels of the row read last.
    stage: String,
    status: String,
}

impl<E: Send + 'static> Batches<E> {
    /// Starts the reading thread (named `name`) on `source`.
    pub(crate) fn spawn<S>(source: S, name: &str) -> std::io::Result<Self>
    where
        S: RowSource<E> + Send + 'static,
    {
        let (full_tx, full) = mpsc::sync_channel(BATCHES_AHEAD);
        let (recycle, recycle_rx) = mpsc::channel();
        std::thread::Builder::new()
            .name(name.into())
            .spawn(move || fill_batches(source, &full_tx, &recycle_rx))?;
        Ok(Batches {
            full,
            recycle,
            current: Batch {
                rows: Vec::new(),
                labelled: Vec::new(),
                filled: 0,
                error: None,
            },
            next: 0,
            stage: String::new(),
            status: String::new(),
        })
    }

    /// Reads the next row into `row`; `Ok(false)` at the end. Errors come in order.
    pub(crate) fn read_into(&mut self, row: &mut Exchange) -> Result<bool, E> {
        while self.next >= self.current.filled {
            if let Some(e) = self.current.error.take() {
                return Err(e);
            }
            let Ok(batch) = self.full.recv() else {
                return Ok(false);
            };
            let done = std::mem::replace(&mut self.current, batch);
            // The thread may have finished; then the batch is simply dropped. The first
            // placeholder holds no rows and is not worth sending.
            if !done.rows.is_empty() {
                let _ = self.recycle.send(done);
            }
            self.next = 0;
        }
        let i = self.next;
        self.next += 1;
        let slot = &self.current.rows[i];
        if self.current.labelled[i] {
            self.stage.clone_from(&slot.stage);
            self.status.clone_from(&slot.status);
        }
        copy_numbers(slot, row);
        set_label(&mut row.stage, &self.stage);
        set_label(&mut row.status, &self.status);
        Ok(true)
    }
}

/// The reading thread: fills batches (reusing the ones the caller has finished with) until the
/// source ends, fails, or the caller hangs up.
fn fill_batches<E, S: RowSource<E>>(
    mut source: S,
    full: &mpsc::SyncSender<Batch<E>>,
    recycle: &mpsc::Receiver<Batch<E>>,
) {
    loop {
        let mut batch = recycle.try_recv().unwrap_or_else(|_| Batch::new());
        batch.filled = 0;
        // The version of the kept labels last written into this batch.
        let mut written = None;
        while batch.filled < batch.rows.len() {
            let i = batch.filled;
            let row = &mut batch.rows[i];
            batch.labelled[i] = match source.read_next(row) {
                Ok(Some(Labels::InRow)) => {
                    written = None;
                    true
                }
                Ok(Some(Labels::Kept(version))) if written != Some(version) => {
                    let (stage, status) = source.labels();
                    set_label(&mut row.stage, stage);
                    set_label(&mut row.status, status);
                    written = Some(version);
                    true
                }
                Ok(Some(Labels::Kept(_))) => false,
                Ok(None) => break,
                Err(e) => {
                    batch.error = Some(e);
                    break;
                }
            };
            batch.filled += 1;
        }
        let last = batch.filled < batch.rows.len();
        if full.send(batch).is_err() || last {
            return;
        }
    }
}

/// `out` made equal to `label`, copying only if it differs.
pub(crate) fn set_label(out: &mut String, label: &str) {
    if out != label {
        out.clear();
        out.push_str(label);
    }
}

/// Every field of `from` but its labels into `to`. Spelt out field by field, so a field added
/// to the row fails to compile here until it is copied.
fn copy_numbers(from: &Exchange, to: &mut Exchange) {
    let Exchange {
        stage: _,
        point,
        burst,
        seq,
        atten_db,
        center_mhz,
        bw_mhz,
        t1_ps,
        t2_ps,
        t3_ps,
        t4_ps,
        dut_gain,
        dut_rssi_dbm,
        ref_gain,
        temp_c,
        status: _,
        time_s,
        rtt_ps,
        range_mm,
        frames,
    } = *from;
    to.point = point;
    to.burst = burst;
    to.seq = seq;
    to.atten_db = atten_db;
    to.center_mhz = center_mhz;
    to.bw_mhz = bw_mhz;
    to.t1_ps = t1_ps;
    to.t2_ps = t2_ps;
    to.t3_ps = t3_ps;
    to.t4_ps = t4_ps;
    to.dut_gain = dut_gain;
    to.dut_rssi_dbm = dut_rssi_dbm;
    to.ref_gain = ref_gain;
    to.temp_c = temp_c;
    to.time_s = time_s;
    to.rtt_ps = rtt_ps;
    to.range_mm = range_mm;
    to.frames = frames;
}
