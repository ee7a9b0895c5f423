//! The observation fields the service keeps, and the original text of a record.
//!
//! Every reader first gathers the fields of one record as text, exactly as
//! read (padding stripped, nothing else touched), into a [`RecordText`]: one
//! buffer per record with a small span table, so that reading a line costs a
//! single allocation however many fields it has. Validation then parses the
//! typed values from that text and keeps the text beside them, so no digit
//! of the input is ever lost.

/// A field of an optical observation, named after its ADES element.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
#[repr(u8)]
pub enum Field {
    PermId,
    ProvId,
    TrkSub,
    ObsSubId,
    ObsId,
    Mode,
    Stn,
    Sys,
    Ctr,
    Pos1,
    Pos2,
    Pos3,
    Prog,
    ObsTime,
    RmsTime,
    Ra,
    Dec,
    RmsRa,
    RmsDec,
    RmsCorr,
    AstCat,
    Mag,
    RmsMag,
    Band,
    PhotCat,
    LogSnr,
    Notes,
    Remarks,
}

/// How many [`Field`]s there are.
pub const FIELD_COUNT: usize = 28;

impl Field {
    pub const ALL: [Field; FIELD_COUNT] = [
        Field::PermId,
        Field::ProvId,
        Field::TrkSub,
        Field::ObsSubId,
        Field::ObsId,
        Field::Mode,
        Field::Stn,
        Field::Sys,
        Field::Ctr,
        Field::Pos1,
        Field::Pos2,
        Field::Pos3,
        Field::Prog,
        Field::ObsTime,
        Field::RmsTime,
        Field::Ra,
        Field::Dec,
        Field::RmsRa,
        Field::RmsDec,
        Field::RmsCorr,
        Field::AstCat,
        Field::Mag,
        Field::RmsMag,
        Field::Band,
        Field::PhotCat,
        Field::LogSnr,
        Field::Notes,
        Field::Remarks,
    ];

    /// The ADES element (PSV column) name.
    pub fn ades_name(self) -> &'static str {
        match self {
            Field::PermId => "permID",
            Field::ProvId => "provID",
            Field::TrkSub => "trkSub",
            Field::ObsSubId => "obsSubID",
            Field::ObsId => "obsID",
            Field::Mode => "mode",
            Field::Stn => "stn",
            Field::Sys => "sys",
            Field::Ctr => "ctr",
            Field::Pos1 => "pos1",
            Field::Pos2 => "pos2",
            Field::Pos3 => "pos3",
            Field::Prog => "prog",
            Field::ObsTime => "obsTime",
            Field::RmsTime => "rmsTime",
            Field::Ra => "ra",
            Field::Dec => "dec",
            Field::RmsRa => "rmsRA",
            Field::RmsDec => "rmsDec",
            Field::RmsCorr => "rmsCorr",
            Field::AstCat => "astCat",
            Field::Mag => "mag",
            Field::RmsMag => "rmsMag",
            Field::Band => "band",
            Field::PhotCat => "photCat",
            Field::LogSnr => "logSNR",
            Field::Notes => "notes",
            Field::Remarks => "remarks",
        }
    }

    pub fn from_ades_name(name: &str) -> Option<Field> {
        Field::ALL.iter().copied().find(|f| f.ades_name() == name)
    }

    /// The field's name in the service's own JSON-lines format. The observer
    /// position fields depend on the frame and are named by the JSON reader.
    pub fn json_name(self) -> &'static str {
        match self {
            Field::PermId => "perm_id",
            Field::ProvId => "prov_id",
            Field::TrkSub => "trk_sub",
            Field::ObsSubId => "obs_sub_id",
            Field::ObsId => "obs_id",
            Field::Mode => "mode",
            Field::Stn => "station",
            Field::Sys => "observer.frame",
            Field::Ctr => "observer.center_spice_id",
            Field::Pos1 => "observer.pos1",
            Field::Pos2 => "observer.pos2",
            Field::Pos3 => "observer.pos3",
            Field::Prog => "program_code",
            Field::ObsTime => "obs_time_utc",
            Field::RmsTime => "rms_time_s",
            Field::Ra => "ra_deg",
            Field::Dec => "dec_deg",
            Field::RmsRa => "rms_ra_arcsec",
            Field::RmsDec => "rms_dec_arcsec",
            Field::RmsCorr => "rms_corr",
            Field::AstCat => "astrometric_catalog",
            Field::Mag => "mag",
            Field::RmsMag => "rms_mag",
            Field::Band => "band",
            Field::PhotCat => "photometric_catalog",
            Field::LogSnr => "log_snr",
            Field::Notes => "notes",
            Field::Remarks => "remarks",
        }
    }
}

/// Where a field's text sits in the record buffer; `start == ABSENT` marks
/// a field the record does not carry.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
struct Span {
    start: u32,
    len: u32,
}

const ABSENT: u32 = u32::MAX;

/// The text of one record's fields, exactly as read. Two records are equal
/// when they hold the same fields with the same text, whatever order the
/// fields were read in.
#[derive(Clone)]
pub struct RecordText {
    buf: String,
    spans: [Span; FIELD_COUNT],
}

impl Default for RecordText {
    fn default() -> Self {
        Self::with_capacity(0)
    }
}

impl RecordText {
    pub fn with_capacity(bytes: usize) -> Self {
        Self {
            buf: String::with_capacity(bytes),
            spans: [Span {
                start: ABSENT,
                len: 0,
            }; FIELD_COUNT],
        }
    }

    /// Sets a field's text; an empty text means the field is absent, as in
    /// ADES PSV. Setting a field twice keeps the last text.
    pub fn set(&mut self, field: Field, text: &str) {
        if text.is_empty() {
            self.spans[field as usize].start = ABSENT;
            return;
        }
        let start = self.buf.len() as u32;
        self.buf.push_str(text);
        self.spans[field as usize] = Span {
            start,
            len: text.len() as u32,
        };
    }

    pub fn get(&self, field: Field) -> Option<&str> {
        let span = self.spans[field as usize];
        if span.start == ABSENT {
            return None;
        }
        self.buf
            .get(span.start as usize..(span.start + span.len) as usize)
    }

    pub fn has(&self, field: Field) -> bool {
        self.spans[field as usize].start != ABSENT
    }

    /// The fields present, in [`Field`] order, with their text.
    pub fn iter(&self) -> impl Iterator<Item = (Field, &str)> {
        Field::ALL
            .iter()
            .filter_map(move |&f| self.get(f).map(|t| (f, t)))
    }
}

impl PartialEq for RecordText {
    fn eq(&self, other: &Self) -> bool {
        Field::ALL.iter().all(|&f| self.get(f) == other.get(f))
    }
}

impl Eq for RecordText {}

impl std::fmt::Debug for RecordText {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_map()
            .entries(self.iter().map(|(k, v)| (k.ades_name(), v)))
            .finish()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_round_trip_and_are_distinct() {
        for f in Field::ALL {
            assert_eq!(Field::from_ades_name(f.ades_name()), Some(f));
        }
        let mut json: Vec<_> = Field::ALL.iter().map(|f| f.json_name()).collect();
        json.sort_unstable();
        json.dedup();
        assert_eq!(json.len(), FIELD_COUNT);
        assert_eq!(Field::ALL.len(), Field::Remarks as usize + 1);
    }

    #[test]
    fn record_text_keeps_text_and_absence() {
        let mut t = RecordText::with_capacity(16);
        t.set(Field::Ra, "215.656050");
        t.set(Field::Dec, "");
        t.set(Field::Stn, "XQ1");
        assert_eq!(t.get(Field::Ra), Some("215.656050"));
        assert_eq!(t.get(Field::Dec), None);
        assert_eq!(t.get(Field::Stn), Some("XQ1"));
        assert!(!t.has(Field::Mag));
        let present: Vec<_> = t.iter().map(|(f, _)| f).collect();
        assert_eq!(present, vec![Field::Stn, Field::Ra]);
    }
}
