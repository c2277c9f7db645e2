//! Input threshold presets named after the logic families' level standards.
//!
//! A plain CMOS input switches at one point somewhere between the family's
//! guaranteed `VIL(max)` and `VIH(min)`; worst-case timing uses those two ends
//! and the typical point is taken as half the supply (common practice, no
//! source). Schmitt inputs have separate rising and falling thresholds that no
//! standard fixes: their bands here are **from memory** and lie inside the
//! family's `VIL`/`VIH` limits.

use crate::error::{Error, Quantity};

/// Where a preset's numbers come from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub enum Provenance {
    /// A published level standard (named in [`InputPreset::standard`]).
    Published,
    /// Typed from memory; verify against the part's data before relying on it.
    FromMemory,
}

/// A threshold band in µV at one supply: guaranteed lowest, typical, highest.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct Band {
    /// Lowest switching voltage in µV.
    pub min_uv: u32,
    /// Typical switching voltage in µV.
    pub typ_uv: u32,
    /// Highest switching voltage in µV.
    pub max_uv: u32,
}

/// Rising and falling threshold bands of an input at one supply.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[cfg_attr(feature = "defmt", derive(defmt::Format))]
pub struct InputBands {
    /// Rising threshold V_T+.
    pub rise: Band,
    /// Falling threshold V_T−.
    pub fall: Band,
    /// `true` for a Schmitt input (separate thresholds); `false` when rise and
    /// fall are one switching point (they then move together in a window).
    pub schmitt: bool,
}

/// One `(supply, VIL(max), VIH(min))` row of a level table, in mV.
type Row = (u32, u32, u32);

#[derive(Debug, Clone, Copy)]
enum Levels {
    /// Absolute VIL/VIH rows, interpolated linearly between rows and scaled
    /// in proportion to the supply beyond the end rows.
    Table(&'static [Row]),
    /// Schmitt bands as fractions of the supply in ppm: (rise min, typ, max), (fall min, typ, max).
    Schmitt([u32; 3], [u32; 3]),
}

/// An input family preset.
#[derive(Debug, Clone, Copy)]
pub struct InputPreset {
    /// Preset name used in stage files and on the command line.
    pub name: &'static str,
    /// The level standard it follows, or what it is based on.
    pub standard: &'static str,
    /// Where its numbers come from.
    pub provenance: Provenance,
    /// Supply range it is defined for, in mV.
    pub vdd_mv: (u32, u32),
    /// Output current a pin of the family is commonly rated for, in mA
    /// (absolute maximum; **from memory**, varies by maker — check the part).
    pub output_limit_ma: u32,
    levels: Levels,
}

/// Every preset. Level-standard rows as transcribed in the project's check-value list.
pub const PRESETS: &[InputPreset] = &[
    InputPreset {
        name: "hc",
        standard: "JEDEC JESD7A high-speed CMOS",
        provenance: Provenance::Published,
        vdd_mv: (2_000, 6_000),
        output_limit_ma: 25,
        levels: Levels::Table(&[(2_000, 500, 1_500), (4_500, 1_350, 3_150), (6_000, 1_800, 4_200)]),
    },
    InputPreset {
        name: "4000b",
        standard: "JEDEC JESD13-B metal-gate CMOS",
        provenance: Provenance::Published,
        vdd_mv: (3_000, 18_000),
        output_limit_ma: 10,
        levels: Levels::Table(&[(5_000, 1_500, 3_500), (10_000, 3_000, 7_000), (15_000, 4_000, 11_000)]),
    },
    InputPreset {
        name: "lvcmos33",
        standard: "JEDEC JESD8C LVCMOS 3.3 V",
        provenance: Provenance::Published,
        vdd_mv: (3_000, 3_600),
        output_limit_ma: 24,
        levels: Levels::Table(&[(3_000, 800, 2_000), (3_600, 800, 2_000)]),
    },
    InputPreset {
        name: "lvcmos25",
        standard: "JEDEC JESD8-5 LVCMOS 2.5 V",
        provenance: Provenance::Published,
        vdd_mv: (2_300, 2_700),
        output_limit_ma: 12,
        levels: Levels::Table(&[(2_300, 700, 1_700), (2_700, 700, 1_700)]),
    },
    InputPreset {
        name: "lvcmos18",
        standard: "JEDEC JESD8-7 LVCMOS 1.8 V (0.35/0.65 of the supply)",
        provenance: Provenance::Published,
        vdd_mv: (1_650, 1_950),
        output_limit_ma: 8,
        levels: Levels::Table(&[(1_650, 578, 1_073), (1_950, 683, 1_268)]),
    },
    InputPreset {
        name: "lvcmos15",
        standard: "JEDEC JESD8-11 LVCMOS 1.5 V (0.35/0.65 of the supply; the 1.4 – 1.6 V range from memory)",
        provenance: Provenance::Published,
        vdd_mv: (1_400, 1_600),
        output_limit_ma: 6,
        levels: Levels::Table(&[(1_400, 490, 910), (1_600, 560, 1_040)]),
    },
    InputPreset {
        name: "lvcmos12",
        standard: "JEDEC JESD8-12 LVCMOS 1.2 V (0.35/0.65 of the supply; the 1.1 – 1.3 V range from memory)",
        provenance: Provenance::Published,
        vdd_mv: (1_100, 1_300),
        output_limit_ma: 4,
        levels: Levels::Table(&[(1_100, 385, 715), (1_300, 455, 845)]),
    },
    InputPreset {
        name: "hc-schmitt",
        standard: "Schmitt input of the high-speed CMOS family (inside JESD7A limits)",
        provenance: Provenance::FromMemory,
        vdd_mv: (2_000, 6_000),
        output_limit_ma: 25,
        levels: Levels::Schmitt([520_000, 580_000, 700_000], [300_000, 420_000, 480_000]),
    },
    InputPreset {
        name: "4000b-schmitt",
        standard: "Schmitt input of the metal-gate CMOS family (inside JESD13-B limits)",
        provenance: Provenance::FromMemory,
        vdd_mv: (3_000, 18_000),
        output_limit_ma: 10,
        levels: Levels::Schmitt([520_000, 600_000, 700_000], [300_000, 400_000, 480_000]),
    },
];

/// Looks a preset up by name (ASCII case-insensitive).
#[must_use]
pub fn preset(name: &str) -> Option<&'static InputPreset> {
    PRESETS.iter().find(|p| p.name.eq_ignore_ascii_case(name))
}

fn frac(vdd_uv: u32, ppm: u32) -> u32 {
    crate::stage::fraction_of(vdd_uv, ppm)
}

impl InputPreset {
    /// Threshold bands at supply `vdd_uv`.
    ///
    /// # Errors
    /// [`Error::OutOfDomain`] with [`Quantity::Vdd`] outside the preset's supply range.
    pub fn bands(&self, vdd_uv: u32) -> Result<InputBands, Error> {
        let mv_lo = u64::from(self.vdd_mv.0) * 1000;
        let mv_hi = u64::from(self.vdd_mv.1) * 1000;
        if u64::from(vdd_uv) < mv_lo || u64::from(vdd_uv) > mv_hi {
            return Err(Error::OutOfDomain(Quantity::Vdd));
        }
        match self.levels {
            Levels::Schmitt(r, f) => Ok(InputBands {
                rise: Band { min_uv: frac(vdd_uv, r[0]), typ_uv: frac(vdd_uv, r[1]), max_uv: frac(vdd_uv, r[2]) },
                fall: Band { min_uv: frac(vdd_uv, f[0]), typ_uv: frac(vdd_uv, f[1]), max_uv: frac(vdd_uv, f[2]) },
                schmitt: true,
            }),
            Levels::Table(rows) => {
                let (vil, vih) = interpolate(rows, vdd_uv).ok_or(Error::OutOfDomain(Quantity::Vdd))?;
                let band = Band { min_uv: vil, typ_uv: vdd_uv / 2, max_uv: vih };
                Ok(InputBands { rise: band, fall: band, schmitt: false })
            }
        }
    }
}

/// (VIL(max), VIH(min)) in µV at `vdd_uv` from a table in mV.
fn interpolate(rows: &[Row], vdd_uv: u32) -> Option<(u32, u32)> {
    let first = rows.first()?;
    let last = rows.last()?;
    let v = u64::from(vdd_uv);
    let scale = |row: &Row| {
        // Proportional to the supply beyond the table ends.
        let s = u64::from(row.0);
        (u64::from(row.1) * v / s, u64::from(row.2) * v / s)
    };
    let (lo, hi) = if v <= u64::from(first.0) * 1000 {
        scale(first)
    } else if v >= u64::from(last.0) * 1000 {
        scale(last)
    } else {
        let pair = rows.windows(2).find(|w| match w {
            [a, b] => v >= u64::from(a.0) * 1000 && v <= u64::from(b.0) * 1000,
            _ => false,
        })?;
        let (a, b) = match pair {
            [a, b] => (a, b),
            _ => return None,
        };
        let span = u64::from(b.0 - a.0) * 1000;
        let at = v - u64::from(a.0) * 1000;
        let lerp = |x0: u32, x1: u32| {
            let (x0, x1) = (u64::from(x0) * 1000, u64::from(x1) * 1000);
            if x1 >= x0 {
                x0 + (x1 - x0) * at / span
            } else {
                x0 - (x0 - x1) * at / span
            }
        };
        (lerp(a.1, b.1), lerp(a.2, b.2))
    };
    Some((u32::try_from(lo).ok()?, u32::try_from(hi).ok()?))
}
