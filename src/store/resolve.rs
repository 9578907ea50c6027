//! Which store a command uses: `--store URL`, else `TAUCAL_STORE`, else the bench's `[store]
//! url`, else a SQLite file `taucal.sqlite` beside the run directory (`runs/taucal.sqlite` for
//! runs in `runs/`).

use super::{StoreError, StoreUrl};
use std::path::Path;

/// The environment variable that names a store.
pub const ENV: &str = "TAUCAL_STORE";

/// The default store's file name, in the run directory's parent.
pub const DEFAULT_FILE: &str = "taucal.sqlite";

/// Where a choice came from, for the line that tells the user.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Origin {
    /// `--store`.
    Flag,
    /// `TAUCAL_STORE`.
    Env,
    /// The bench file's `[store] url`.
    Bench,
    /// The default beside the run directory.
    Default,
}

impl Origin {
    /// How the user named it.
    pub fn describe(self) -> &'static str {
        match self {
            Origin::Flag => "--store",
            Origin::Env => "TAUCAL_STORE",
            Origin::Bench => "the bench's [store] url",
            Origin::Default => "the default beside the run directory",
        }
    }
}

/// Chooses the store for a run in `run_dir`. `env` is `TAUCAL_STORE`'s value (passed in so
/// the choice is a pure function). A relative `sqlite:` path in a bench file is relative to
/// the bench file's folder, as its other paths are.
pub fn choose(
    flag: Option<&str>,
    env: Option<&str>,
    bench: Option<(&str, &Path)>,
    run_dir: &Path,
) -> Result<(StoreUrl, Origin), StoreError> {
    if let Some(f) = flag {
        return Ok((StoreUrl::parse(f)?, Origin::Flag));
    }
    if let Some(e) = env.filter(|e| !e.trim().is_empty()) {
        return Ok((StoreUrl::parse(e)?, Origin::Env));
    }
    if let Some((url, folder)) = bench {
        let parsed = match StoreUrl::parse(url)? {
            StoreUrl::Sqlite(p) if p.is_relative() => StoreUrl::Sqlite(folder.join(p)),
            other => other,
        };
        return Ok((parsed, Origin::Bench));
    }
    let parent = run_dir
        .parent()
        .filter(|p| !p.as_os_str().is_empty())
        .unwrap_or(Path::new("."));
    Ok((StoreUrl::Sqlite(parent.join(DEFAULT_FILE)), Origin::Default))
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::path::PathBuf;

    #[test]
    fn the_flag_beats_the_environment_beats_the_bench_beats_the_default() {
        let run = Path::new("runs/20261203T000000Z-x");
        let bench = Some(("sqlite:line.sqlite", Path::new("benches")));
        let pick = |flag, env, bench| choose(flag, env, bench, run).unwrap();
        assert_eq!(pick(Some("none"), Some("sqlite:e"), bench).0, StoreUrl::Off);
        assert_eq!(
            pick(None, Some("sqlite:e.sqlite"), bench),
            (StoreUrl::Sqlite(PathBuf::from("e.sqlite")), Origin::Env)
        );
        assert_eq!(
            pick(None, None, bench),
            (
                StoreUrl::Sqlite(PathBuf::from("benches/line.sqlite")),
                Origin::Bench
            )
        );
        assert_eq!(
            pick(None, Some(" "), None),
            (
                StoreUrl::Sqlite(PathBuf::from("runs/taucal.sqlite")),
                Origin::Default
            )
        );
        assert_eq!(
            choose(None, None, None, Path::new("solo")).unwrap().0,
            StoreUrl::Sqlite(PathBuf::from("./taucal.sqlite"))
        );
        assert!(choose(Some("mongodb://x"), None, None, run).is_err());
    }
}
