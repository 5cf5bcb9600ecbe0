//! Flag values clap parses and checks before anything runs: channels, bands, mains, loads,
//! word lengths.

use super::*;

/// `--channel`: one channel, or all of them.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ChannelChoice {
    All,
    One(usize),
}

impl ChannelChoice {
    /// `None` for all.
    pub fn get(self) -> Option<usize> {
        match self {
            ChannelChoice::All => None,
            ChannelChoice::One(n) => Some(n),
        }
    }
}

impl std::str::FromStr for ChannelChoice {
    type Err = String;
    fn from_str(text: &str) -> Result<Self, String> {
        if text.eq_ignore_ascii_case("all") {
            return Ok(ChannelChoice::All);
        }
        text.trim()
            .parse::<usize>()
            .map(ChannelChoice::One)
            .map_err(|_| format!("--channel takes a number from 1 or `all`, got `{text}`"))
    }
}

/// A list of channel numbers from 1 (`1` or `1,2`), or `all`.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum ChannelList {
    All,
    These(Vec<usize>),
}

impl std::str::FromStr for ChannelList {
    type Err = String;
    fn from_str(text: &str) -> Result<Self, String> {
        if text.eq_ignore_ascii_case("all") {
            return Ok(ChannelList::All);
        }
        text.split(',')
            .map(|t| t.trim().parse::<usize>().ok().filter(|&n| n >= 1))
            .collect::<Option<Vec<_>>>()
            .map(ChannelList::These)
            .ok_or_else(|| {
                format!("takes channel numbers from 1 like 1 or 1,2, or `all`; got `{text}`")
            })
    }
}

/// `--band LO:HI` in Hz.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Band {
    pub low_hz: f64,
    pub high_hz: f64,
}

impl std::str::FromStr for Band {
    type Err = String;
    fn from_str(text: &str) -> Result<Self, String> {
        let said = || format!("--band takes LO:HI in Hz, for example 20:20000; got `{text}`");
        let (lo, hi) = text.split_once(':').ok_or_else(said)?;
        let number = |s: &str| {
            s.trim().parse::<f64>().map_err(|_| {
                format!("--band takes LO:HI in Hz, for example 20:20000; `{s}` is not a number")
            })
        };
        let (low_hz, high_hz) = (number(lo)?, number(hi)?);
        if !(low_hz.is_finite() && high_hz.is_finite() && low_hz >= 0.0 && high_hz > low_hz) {
            return Err(format!(
                "--band takes LO:HI with 0 <= LO < HI in Hz, for example 20:20000; got `{text}`"
            ));
        }
        Ok(Band { low_hz, high_hz })
    }
}

/// `--mains auto|50|60|HZ`.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct MainsChoice(pub Mains);

impl std::str::FromStr for MainsChoice {
    type Err = String;
    fn from_str(text: &str) -> Result<Self, String> {
        if text.eq_ignore_ascii_case("auto") {
            return Ok(MainsChoice(Mains::Auto));
        }
        text.trim()
            .parse::<f64>()
            .ok()
            .filter(|f| f.is_finite() && *f > 0.0)
            .map(|f| MainsChoice(Mains::Hz(f)))
            .ok_or_else(|| format!("--mains takes auto, 50, 60 or a frequency in Hz; got `{text}`"))
    }
}

/// A frequency in Hz, above 0 (the range against the rate is checked where the rate is known).
pub fn hertz(text: &str) -> Result<f64, String> {
    text.trim()
        .parse::<f64>()
        .ok()
        .filter(|f| f.is_finite() && *f > 0.0)
        .ok_or_else(|| {
            format!("takes frequencies in Hz above 0, like 997 or 40,997,10000; got `{text}`")
        })
}

fn interface_channel(flag: &str, text: &str) -> Result<usize, String> {
    text.trim()
        .parse::<usize>()
        .ok()
        .filter(|&n| n >= 1)
        .ok_or_else(|| {
            format!("--{flag} takes interface channel numbers from 1, like 1 or 1,2; got `{text}`")
        })
}

/// `--outputs`: interface outputs from 1.
pub fn output_channel(text: &str) -> Result<usize, String> {
    interface_channel("outputs", text)
}

/// `--inputs`: interface inputs from 1.
pub fn input_channel(text: &str) -> Result<usize, String> {
    interface_channel("inputs", text)
}

/// A resistance in ohms, above 0.
pub fn ohms(text: &str) -> Result<f64, String> {
    text.trim()
        .parse::<f64>()
        .ok()
        .filter(|r| r.is_finite() && *r > 0.0)
        .ok_or_else(|| format!("takes resistances in ohms above 0, like 8,16; got `{text}`"))
}

/// `--bits`: the sample format of a written stimulus.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Bits {
    // (No doc comments on the values: clap would switch every help line to the long layout.)
    #[value(name = "16")]
    Int16,
    #[value(name = "24")]
    Int24,
    #[value(name = "32f", alias = "32")]
    Float32,
}
