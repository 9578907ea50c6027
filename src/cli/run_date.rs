//! The run's start date as the commands judge a reference certificate by, and the line that
//! says whether it is due.

use crate::bench::certificate::{run_date, TODAY_VAR};
use crate::bench::ReferenceCertificate;
use crate::diagnostic::Diagnostic;
use time::{Date, OffsetDateTime};

/// Today, UTC, or the date `TAUCAL_TODAY` gives.
pub fn today() -> Result<Date, Diagnostic> {
    run_date(OffsetDateTime::now_utc()).map_err(|text| {
        Diagnostic::plain(format!("{TODAY_VAR}={text} is not a date")).with_hint(format!(
            "write YYYY-MM-DD, e.g. {TODAY_VAR}=2027-03-01, or unset it"
        ))
    })
}

/// One line saying which certificate the reference's K comes from and whether it is due.
pub fn certificate_line(c: &ReferenceCertificate, on: Date) -> String {
    format!(
        "reference K from certificate {} ({}), issued {}, due {}: {}",
        c.id,
        c.lab,
        c.issued,
        c.due,
        if c.overdue_on(on) {
            format!("PAST DUE on {on}")
        } else {
            format!("valid on {on}")
        }
    )
}
