//! Store-and-forward: copy to a destination store every run it lacks or holds in an older
//! state. Batches are transactions of their own, so an interrupted sync leaves whole runs and
//! the next one carries on where it stopped; a run copied twice is still one run.

use super::{RunVersion, Store, StoreError};
use std::collections::HashMap;

/// Runs per destination transaction: large enough to amortise a network round trip's commit,
/// small enough that an interruption loses little.
pub const BATCH: usize = 100;

/// What a sync did.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct Synced {
    /// Runs copied.
    pub copied: usize,
    /// Runs the destination already held as the source does.
    pub current: usize,
}

/// The runs of `source` that `dest` lacks or holds in another state.
pub fn missing(source: &[RunVersion], dest: &[RunVersion]) -> Vec<String> {
    let have: HashMap<&str, &RunVersion> = dest.iter().map(|v| (v.run_id.as_str(), v)).collect();
    source
        .iter()
        .filter(|v| have.get(v.run_id.as_str()) != Some(v))
        .map(|v| v.run_id.clone())
        .collect()
}

/// Copies to `dest` what it lacks of `source`; `progress` hears the running count.
pub fn sync(
    source: &mut dyn Store,
    dest: &mut dyn Store,
    mut progress: impl FnMut(usize, usize),
) -> Result<Synced, StoreError> {
    let from = source.run_versions()?;
    let todo = missing(&from, &dest.run_versions()?);
    let mut done = 0;
    for ids in todo.chunks(BATCH) {
        let mut batch = Vec::with_capacity(ids.len());
        for id in ids {
            // A run that vanished from the source between the listing and now is skipped.
            if let Some(rec) = source.get_run(id)? {
                batch.push(rec);
            }
        }
        dest.put_runs(&batch)?;
        done += batch.len();
        progress(done, todo.len());
    }
    Ok(Synced {
        copied: done,
        current: from.len() - todo.len(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    fn v(id: &str, status: &str, fin: Option<&str>) -> RunVersion {
        RunVersion {
            run_id: id.into(),
            status: status.into(),
            finished_utc: fin.map(Into::into),
        }
    }

    #[test]
    fn a_destination_lacks_new_runs_and_runs_it_holds_in_an_older_state() {
        let source = [
            v("a", "completed", Some("t1")),
            v("b", "completed", Some("t2")),
            v("c", "running", None),
        ];
        let dest = [v("a", "completed", Some("t1")), v("b", "running", None)];
        assert_eq!(missing(&source, &dest), ["b", "c"]);
        assert!(missing(&source, &source).is_empty());
    }
}
