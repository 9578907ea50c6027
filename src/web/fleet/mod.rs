//! The fleet's pages (`taucal fleet serve`): units, a unit, the cells, a cell's population,
//! the stations. Read-only, and computed at each request by the very functions the `fleet` and
//! `store` commands print from (`fleet::cells`, `fleet::centred`, `fleet::outliers`,
//! `fleet::stations`, `fleet::shown`, `store::table`), so a page and a command never disagree.
//!
//! Each page is a pure function of what the store returned (one file per page); this file
//! reads the store, off the server's threads, and answers.

pub mod cell;
pub mod cells;
pub mod markup;
pub mod stations;
pub mod style;
pub mod svg_axis;
pub mod svg_histogram;
pub mod svg_intervals;
pub mod unit;
pub mod units;

use crate::export::{render, Format};
use crate::fleet::cells::cell_stats;
use crate::fleet::centred::{deviations, key};
use crate::fleet::outliers::outliers;
use crate::fleet::station_cells::station_cells;
use crate::fleet::stations::station_offsets;
use crate::store::table::export_table;
use crate::store::{Store, StoreUrl};
use crate::web::{escape, html, page};
use axum::extract::{Path, Query, State};
use axum::http::StatusCode;
use axum::response::Response;
use axum::routing::get;
use axum::Router;
use std::sync::Arc;

/// What the pages are served from.
#[derive(Debug, Clone)]
pub struct FleetSite {
    /// The store, read at each request.
    pub url: StoreUrl,
    /// Smallest station offset worth flagging, ps (as `fleet stations --threshold-ps`).
    pub threshold_ps: f64,
}

/// Why a page has nothing to show.
#[derive(Debug, Clone, PartialEq)]
enum PageError {
    /// No such unit or cell.
    NotFound(String),
    /// The store could not be read.
    Failed(String),
}

/// A page's title and body.
type Page = (String, String);

/// The routes, over `site`.
pub fn router(site: FleetSite) -> Router {
    Router::new()
        .route("/", get(units_page))
        .route("/cells", get(cells_page))
        .route("/stations", get(stations_page))
        .route("/unit/{serial}", get(unit_page))
        .route("/cell/{center}/{bw}/{gain}", get(cell_page))
        .fallback(|State(site): State<Arc<FleetSite>>| async move {
            let sub = format!("from {}", site.url.redacted());
            answer(Err(PageError::NotFound("no such page".into())), &sub)
        })
        .with_state(Arc::new(site))
}

/// Opens the store for one request: each page sees what the store holds now. A page view
/// only reads: it never creates a missing store nor migrates one.
fn open(site: &FleetSite) -> Result<Box<dyn Store>, PageError> {
    crate::store::open_existing(&site.url)
        .map_err(|e| PageError::Failed(e.to_string()))?
        .ok_or_else(|| PageError::Failed("--store none names no store".into()))
}

fn failed(e: impl std::fmt::Display) -> PageError {
    PageError::Failed(e.to_string())
}

/// Builds a page on a blocking thread (store queries block) and answers with it.
async fn build<F>(site: Arc<FleetSite>, make: F) -> Response
where
    F: FnOnce(&FleetSite, &mut dyn Store) -> Result<Page, PageError> + Send + 'static,
{
    let sub = format!("from {}", site.url.redacted());
    let done = tokio::task::spawn_blocking(move || {
        let mut store = open(&site)?;
        make(site.as_ref(), store.as_mut())
    })
    .await;
    let built = done.unwrap_or_else(|e| Err(failed(format!("the page could not be built: {e}"))));
    answer(built, &sub)
}

/// The response for a page or its error, under a masthead naming the store `sub`.
fn answer(built: Result<Page, PageError>, sub: &str) -> Response {
    let style = style::STYLE;
    match built {
        Ok((title, body)) => html(page("taucal fleet", &title, sub, style, &body, "")),
        Err(e) => {
            let (code, title, message) = match e {
                PageError::NotFound(m) => (StatusCode::NOT_FOUND, "Not found", m),
                PageError::Failed(m) => (
                    StatusCode::INTERNAL_SERVER_ERROR,
                    "Cannot read the store",
                    m,
                ),
            };
            let body = format!(
                "{}<section><h2>{title}</h2><p>{}</p></section>",
                markup::tabs(markup::Tab::None),
                escape(&message)
            );
            let mut r = html(page("taucal fleet", title, sub, style, &body, ""));
            *r.status_mut() = code;
            r
        }
    }
}

async fn units_page(
    State(site): State<Arc<FleetSite>>,
    Query(filter): Query<units::UnitFilter>,
) -> Response {
    build(site, move |site, store| {
        let all = store.units().map_err(failed)?;
        let runs = store.runs(None).map_err(failed)?;
        Ok((
            "Units".into(),
            units::body(&all, &runs, &filter, &site.url.redacted()),
        ))
    })
    .await
}

async fn cells_page(State(site): State<Arc<FleetSite>>) -> Response {
    build(site, |_, store| {
        let cells = store.fleet_cells().map_err(failed)?;
        let devs = deviations(&cells);
        Ok((
            "Cells".into(),
            cells::body(&cell_stats(&cells), &outliers(&devs), devs.len()),
        ))
    })
    .await
}

async fn stations_page(State(site): State<Arc<FleetSite>>) -> Response {
    build(site, |site, store| {
        let cells = store.fleet_cells().map_err(failed)?;
        let offsets = station_offsets(&deviations(&cells), site.threshold_ps);
        Ok((
            "Stations".into(),
            stations::body(&offsets, site.threshold_ps),
        ))
    })
    .await
}

async fn unit_page(State(site): State<Arc<FleetSite>>, Path(serial): Path<String>) -> Response {
    build(site, move |_, store| {
        let all = store.units().map_err(failed)?;
        let Some(summary) = all.iter().find(|u| u.serial == serial) else {
            return Err(PageError::NotFound(format!(
                "no unit `{serial}` in the store"
            )));
        };
        let runs = store.runs(Some(&serial)).map_err(failed)?;
        let latest = store.latest_accepted(&serial).map_err(failed)?;
        let table_csv = match &latest {
            Some(rec) => {
                let t = export_table(rec).map_err(failed)?;
                Some(render(&t, Format::Csv).map_err(failed)?)
            }
            None => None,
        };
        let cells = store.fleet_cells().map_err(failed)?;
        let devs = deviations(&cells);
        let out = outliers(&devs);
        let view = unit::UnitView {
            summary,
            runs: &runs,
            latest: latest.as_ref(),
            table_csv: table_csv.as_deref(),
            stats: &cell_stats(&cells),
            place: devs.iter().find(|d| d.serial == serial),
            outlier: out.iter().find(|o| o.unit.serial == serial),
        };
        Ok((format!("Unit {serial}"), unit::body(&view)))
    })
    .await
}

async fn cell_page(
    State(site): State<Arc<FleetSite>>,
    Path((center, bw, gain)): Path<(i64, i64, i64)>,
) -> Response {
    build(site, move |site, store| {
        let cells = store.fleet_cells().map_err(failed)?;
        let cell = (center, bw, gain);
        let stats = cell_stats(&cells);
        let Some(st) = stats.iter().find(|s| s.cell == cell) else {
            return Err(PageError::NotFound(format!(
                "no unit's latest accepted run measured cell {center}/{bw}/{gain}"
            )));
        };
        let members: Vec<_> = cells.iter().filter(|c| key(c) == cell).collect();
        let offsets = station_offsets(&deviations(&cells), site.threshold_ps);
        let flagged: Vec<&str> = offsets
            .iter()
            .filter(|o| o.flagged)
            .map(|o| o.station.as_str())
            .collect();
        Ok((
            format!("Cell {center}/{bw}/{gain}"),
            cell::body(st, &members, &station_cells(&cells, cell), &flagged),
        ))
    })
    .await
}
