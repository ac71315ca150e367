//! Units of measure at the edges of the model.
//!
//! Everything inside ringmain is SI: metres, cubic metres per second, seconds, pascals.
//! A model file names the units its numbers are written in ([`UnitSystem`]); the reader converts
//! into SI with the exact factors below and the writers convert back. No other module converts.
//!
//! Exact factors (by definition): 1 ft = 0.3048 m, 1 in = 0.0254 m, 1 US gallon =
//! 3.785411784 L, 1 psi = 6894.757293168 Pa, 1 bar = 100 kPa, 1 hp (mechanical) = 550 ft·lbf/s
//! = 745.69987158227022 W.
//!
//! Pressures are carried inside as *pressure head* in metres of the model's own water,
//! `p / (ρ g)`. A pressure given as "m" or "ft" is that head directly; a pressure in kPa, bar or
//! psi is divided by `ρ g` with ρ the water density at the model's temperature. This is why the
//! pressure conversion needs the density.

use std::fmt;

/// Standard acceleration of gravity, m/s² (CGPM 1901, exact).
pub const GRAVITY: f64 = 9.806_65;
/// One foot in metres (international foot, exact).
pub const FOOT: f64 = 0.3048;
/// One inch in metres (exact).
pub const INCH: f64 = 0.0254;
/// One US liquid gallon in cubic metres (exact).
pub const US_GALLON: f64 = 3.785_411_784e-3;
/// One pound-force per square inch in pascals (exact from the pound and the foot).
pub const PSI: f64 = 6_894.757_293_168;
/// One mechanical horsepower (550 ft·lbf/s) in watts.
pub const HORSEPOWER: f64 = 745.699_871_582_270_2;

macro_rules! unit_enum {
    ($(#[$doc:meta])* $name:ident { $($(#[$vdoc:meta])* $var:ident = ($label:literal, $factor:expr)),+ $(,)? }) => {
        $(#[$doc])*
        #[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
        pub enum $name {
            $($(#[$vdoc])* $var),+
        }

        impl $name {
            /// Every unit of this quantity, in the order the documentation lists them.
            pub const ALL: &'static [$name] = &[$($name::$var),+];

            /// The name used in model files and reports.
            pub fn label(self) -> &'static str {
                match self { $($name::$var => $label),+ }
            }

            /// SI value of one of this unit.
            pub fn factor(self) -> f64 {
                match self { $($name::$var => $factor),+ }
            }

            /// Parses the name used in model files (exact spelling).
            pub fn parse(text: &str) -> Option<Self> {
                match text { $($label => Some($name::$var),)+ _ => None }
            }

            /// The accepted names, for error messages.
            pub fn choices() -> String {
                Self::ALL.iter().map(|u| format!("\"{}\"", u.label())).collect::<Vec<_>>().join(", ")
            }

            /// Converts a value in this unit into SI.
            pub fn to_si(self, value: f64) -> f64 { value * self.factor() }

            /// Converts an SI value into this unit.
            pub fn from_si(self, value: f64) -> f64 { value / self.factor() }
        }

        impl fmt::Display for $name {
            fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result { f.write_str(self.label()) }
        }
    };
}

unit_enum! {
    /// Lengths, elevations, heads, tank levels and tank diameters.
    LengthUnit {
        /// metre
        Metre = ("m", 1.0),
        /// international foot
        Foot = ("ft", FOOT),
    }
}

unit_enum! {
    /// Pipe and valve diameters.
    DiameterUnit {
        /// millimetre
        Millimetre = ("mm", 1e-3),
        /// metre
        Metre = ("m", 1.0),
        /// inch
        Inch = ("in", INCH),
        /// foot
        Foot = ("ft", FOOT),
    }
}

unit_enum! {
    /// Darcy–Weisbach absolute roughness (Hazen–Williams C is dimensionless).
    RoughnessUnit {
        /// millimetre
        Millimetre = ("mm", 1e-3),
        /// metre
        Metre = ("m", 1.0),
        /// inch
        Inch = ("in", INCH),
        /// foot
        Foot = ("ft", FOOT),
    }
}

unit_enum! {
    /// Flow rates and demands.
    FlowUnit {
        /// litre per second
        LitrePerSecond = ("L/s", 1e-3),
        /// cubic metre per second
        CubicMetrePerSecond = ("m3/s", 1.0),
        /// cubic metre per hour
        CubicMetrePerHour = ("m3/h", 1.0 / 3600.0),
        /// megalitre per day
        MegalitrePerDay = ("ML/d", 1000.0 / 86_400.0),
        /// US gallon per minute
        GallonPerMinute = ("gpm", US_GALLON / 60.0),
        /// cubic foot per second
        CubicFootPerSecond = ("cfs", FOOT * FOOT * FOOT),
        /// million US gallons per day
        MillionGallonPerDay = ("Mgal/d", 1e6 * US_GALLON / 86_400.0),
    }
}

/// Pressures read from and written to the user.
#[derive(Clone, Copy, Debug, PartialEq, Eq, Hash)]
pub enum PressureUnit {
    /// metre of the model's water (pressure head)
    MetreOfWater,
    /// kilopascal
    Kilopascal,
    /// bar (100 kPa)
    Bar,
    /// pound-force per square inch
    Psi,
    /// foot of the model's water (pressure head)
    FootOfWater,
}

impl PressureUnit {
    /// Every pressure unit.
    pub const ALL: &'static [PressureUnit] = &[
        PressureUnit::MetreOfWater,
        PressureUnit::Kilopascal,
        PressureUnit::Bar,
        PressureUnit::Psi,
        PressureUnit::FootOfWater,
    ];

    /// The name used in model files and reports.
    pub fn label(self) -> &'static str {
        match self {
            PressureUnit::MetreOfWater => "m",
            PressureUnit::Kilopascal => "kPa",
            PressureUnit::Bar => "bar",
            PressureUnit::Psi => "psi",
            PressureUnit::FootOfWater => "ft",
        }
    }

    /// Parses the name used in model files.
    pub fn parse(text: &str) -> Option<Self> {
        Self::ALL.iter().copied().find(|u| u.label() == text)
    }

    /// The accepted names, for error messages.
    pub fn choices() -> String {
        Self::ALL.iter().map(|u| format!("\"{}\"", u.label())).collect::<Vec<_>>().join(", ")
    }

    /// Pascals per unit, or `None` for the head units (m, ft of water).
    fn pascals(self) -> Option<f64> {
        match self {
            PressureUnit::Kilopascal => Some(1e3),
            PressureUnit::Bar => Some(1e5),
            PressureUnit::Psi => Some(PSI),
            PressureUnit::MetreOfWater | PressureUnit::FootOfWater => None,
        }
    }

    /// Converts a pressure in this unit to pressure head (m of water of density `density`).
    pub fn to_head(self, value: f64, density: f64) -> f64 {
        match self {
            PressureUnit::MetreOfWater => value,
            PressureUnit::FootOfWater => value * FOOT,
            _ => value * self.pascals().unwrap_or(1.0) / (density * GRAVITY),
        }
    }

    /// Converts a pressure head (m of water of density `density`) into this unit.
    pub fn from_head(self, head: f64, density: f64) -> f64 {
        match self {
            PressureUnit::MetreOfWater => head,
            PressureUnit::FootOfWater => head / FOOT,
            _ => head * density * GRAVITY / self.pascals().unwrap_or(1.0),
        }
    }
}

impl fmt::Display for PressureUnit {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.label())
    }
}

/// The units a model's numbers are written in. Defaults are SI as documented in the README.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct UnitSystem {
    /// Lengths, elevations, heads, tank levels and tank diameters.
    pub length: LengthUnit,
    /// Pipe and valve diameters.
    pub diameter: DiameterUnit,
    /// Flows and demands.
    pub flow: FlowUnit,
    /// Pressures.
    pub pressure: PressureUnit,
    /// Darcy–Weisbach absolute roughness.
    pub roughness: RoughnessUnit,
}

impl Default for UnitSystem {
    fn default() -> Self {
        UnitSystem {
            length: LengthUnit::Metre,
            diameter: DiameterUnit::Millimetre,
            flow: FlowUnit::LitrePerSecond,
            pressure: PressureUnit::MetreOfWater,
            roughness: RoughnessUnit::Millimetre,
        }
    }
}

impl UnitSystem {
    /// US-customary models are those whose lengths are in feet; they take power in horsepower.
    pub fn is_us_customary(&self) -> bool {
        self.length == LengthUnit::Foot
    }

    /// Label of velocities in reports: the length unit per second.
    pub fn velocity_label(&self) -> &'static str {
        match self.length {
            LengthUnit::Metre => "m/s",
            LengthUnit::Foot => "ft/s",
        }
    }
}

/// Suggests the closest accepted name for a misspelt one (edit distance at most 2, ignoring case).
pub fn suggest<'a>(given: &str, choices: impl IntoIterator<Item = &'a str>) -> Option<&'a str> {
    let given_low = given.to_ascii_lowercase();
    choices
        .into_iter()
        .map(|c| (edit_distance(&given_low, &c.to_ascii_lowercase()), c))
        .filter(|(d, _)| *d <= 2)
        .min_by_key(|(d, _)| *d)
        .map(|(_, c)| c)
}

/// Levenshtein distance between two short strings.
pub(crate) fn edit_distance(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut row: Vec<usize> = (0..=b.len()).collect();
    for (i, ca) in a.chars().enumerate() {
        let mut prev = row[0];
        row[0] = i + 1;
        for (j, cb) in b.iter().enumerate() {
            let cur = row[j + 1];
            row[j + 1] = if ca == *cb { prev } else { 1 + prev.min(row[j]).min(row[j + 1]) };
            prev = cur;
        }
    }
    row[b.len()]
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn exact_flow_factors() {
        // 1 gpm = 3.785411784 L / 60 s = 6.30901964e-5 m3/s (exact by definition of the gallon).
        assert!((FlowUnit::GallonPerMinute.factor() - 6.309_019_64e-5).abs() < 1e-15);
        // 1 cfs = 0.3048^3 m3/s = 0.028316846592 (exact).
        assert!((FlowUnit::CubicFootPerSecond.factor() - 0.028_316_846_592).abs() < 1e-15);
        // 1 Mgal/d = 3785.411784 m3/d = 0.0438126364... m3/s.
        assert!((FlowUnit::MillionGallonPerDay.factor() - 3_785.411_784 / 86_400.0).abs() < 1e-15);
    }

    #[test]
    fn pressure_round_trip() {
        let rho = 998.2;
        for &u in PressureUnit::ALL {
            let h = u.to_head(42.0, rho);
            assert!((u.from_head(h, rho) - 42.0).abs() < 1e-12, "{u}");
        }
        // 10 m of 1000 kg/m3 water = 98.0665 kPa (conventional metre of water column).
        assert!((PressureUnit::Kilopascal.from_head(10.0, 1000.0) - 98.0665).abs() < 1e-9);
    }

    #[test]
    fn suggestions() {
        assert_eq!(suggest("l/s", FlowUnit::ALL.iter().map(|u| u.label())), Some("L/s"));
        assert_eq!(suggest("gpn", FlowUnit::ALL.iter().map(|u| u.label())), Some("gpm"));
        assert_eq!(suggest("furlongs", FlowUnit::ALL.iter().map(|u| u.label())), None);
    }
}
