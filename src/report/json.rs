//! Trial records as JSON: one pretty-printed object per record, newline-terminated. Floats are
//! written as the shortest text that reads back to the same value.

use crate::measure::TrialRecord;

/// The record as pretty JSON text with a trailing newline.
pub fn record_json(record: &TrialRecord) -> String {
    // Serialising plain structs of strings, numbers and options cannot fail.
    let mut text = serde_json::to_string_pretty(record).unwrap_or_else(|e| {
        format!("{{\"trial\": {:?}, \"status\": \"error\", \"error\": \"cannot serialise record: {e}\"}}", record.trial)
    });
    text.push('\n');
    text
}

/// Parses a record written by [`record_json`].
pub fn parse_record(text: &str) -> serde_json::Result<TrialRecord> {
    serde_json::from_str(text)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_record_round_trips() {
        let mut r = TrialRecord::empty("x", Some("g"));
        r.click_onset_s = Some(0.123_456_789_012_3);
        let back = parse_record(&record_json(&r)).unwrap();
        assert_eq!(back, r);
    }
}
