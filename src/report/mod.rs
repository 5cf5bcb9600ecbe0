//! Rendering results: terminal tables, JSON, CSV. Every renderer draws the same typed result.

pub mod charts;
pub mod compare;
pub mod html;
pub mod imd;
pub mod model;
pub mod number;
pub mod power;
pub mod response;
pub mod square;
pub mod tone;
pub mod trend;

use crate::warning::Warning;

/// Version of the JSON layout; bumped when a field changes meaning or disappears. 4: warnings
/// are `{"code", "message"}` objects (bare strings before); 5: so are compare's and match's.
pub const SCHEMA_VERSION: u32 = 5;

/// A CSV field for a figure that may be missing (empty when it is).
pub fn csv_num(v: Option<f64>) -> String {
    v.map_or(String::new(), |x| format!("{x}"))
}

/// A CSV text field, quoted.
pub fn csv_text(t: &str) -> String {
    format!("\"{}\"", t.replace('"', "\"\""))
}

/// A per-channel result: which channel, and its measurement-quality warnings.
pub trait ChannelResult {
    fn channel(&self) -> usize;
    fn warnings(&self) -> &[Warning];
    fn warnings_mut(&mut self) -> &mut Vec<Warning>;
}

/// Add what the rig noticed while measuring (`(channel, note)`) to each channel's warnings.
pub fn add_rig_notes<T: ChannelResult>(results: &mut [T], notes: &[(usize, Warning)]) {
    for r in results {
        let ch = r.channel();
        for (c, n) in notes {
            if *c == ch && !r.warnings().contains(n) {
                r.warnings_mut().push(n.clone());
            }
        }
    }
}

macro_rules! channel_result {
    ($($t:ty),*) => {$(
        impl ChannelResult for $t {
            fn channel(&self) -> usize {
                self.channel
            }
            fn warnings(&self) -> &[Warning] {
                &self.warnings
            }
            fn warnings_mut(&mut self) -> &mut Vec<Warning> {
                &mut self.warnings
            }
        }
    )*};
}

channel_result!(
    crate::analysis::tone::ToneResult,
    crate::analysis::sweep::ResponseResult,
    crate::analysis::imd::ImdResult,
    crate::analysis::noise::NoiseResult,
    crate::procedure::power::PowerResult,
    crate::procedure::zout::ZoutResult,
    crate::analysis::blocks::TrendResult,
    crate::analysis::square::SquareResult
);

/// A measuring command's report: its per-channel results and the channels that failed, and its
/// three renderings (JSON, CSV, table).
/// The item of `items` whose frequency (`freq`) lies nearest `f` in log terms, if one lies
/// within 3 % of it: the row a table shows for a round frequency.
pub fn nearest<T>(items: &[T], f: f64, freq: impl Fn(&T) -> f64) -> Option<&T> {
    let off = |x: &T| (freq(x) / f).ln().abs();
    items
        .iter()
        .min_by(|a, b| off(a).total_cmp(&off(b)))
        .filter(|x| off(x) < 0.03)
}

/// Every report prints as indented JSON ending in a newline.
pub trait ToJson: serde::Serialize {
    fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).expect("a report serializes") + "\n"
    }
}

impl<T: serde::Serialize> ToJson for T {}

pub trait Printed {
    type Channel: ChannelResult;
    fn results(&self) -> &[Self::Channel];
    fn errors(&self) -> &[tone::ChannelError];
    fn json(&self) -> String;
    fn csv(&self) -> String;
    fn table(&self) -> String;
}

macro_rules! printed {
    ($($t:ty => $channel:ty, $results:ident, $errors:ident);* $(;)?) => {$(
        impl Printed for $t {
            type Channel = $channel;
            fn results(&self) -> &[$channel] {
                &self.$results
            }
            fn errors(&self) -> &[tone::ChannelError] {
                printed!(@errors self, $errors)
            }
            fn json(&self) -> String {
                self.to_json()
            }
            fn csv(&self) -> String {
                self.to_csv()
            }
            fn table(&self) -> String {
                self.to_table()
            }
        }
    )*};
    (@errors $s:ident, none) => { &[] };
    (@errors $s:ident, $f:ident) => { &$s.$f };
}

printed!(
    tone::AnalyzeReport => crate::analysis::tone::ToneResult, channels, channel_errors;
    imd::ImdReport => crate::analysis::imd::ImdResult, channels, channel_errors;
    power::PowerReport => crate::procedure::power::PowerResult, results, channel_errors;
    power::ZoutReport => crate::procedure::zout::ZoutResult, results, none;
    response::ResponseReport => crate::analysis::sweep::ResponseResult, channels, channel_errors;
    trend::TrendReport => crate::analysis::blocks::TrendResult, channels, channel_errors;
    square::SquareReport => crate::analysis::square::SquareResult, channels, channel_errors;
);
