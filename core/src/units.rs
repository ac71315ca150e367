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
//!
//! [`Converter`] converts every [`Quantity`] between SI and one model's units, and labels it:
//! the one path every writer, reader of model-unit values, the C library and the criteria use.

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

    /// A pressure head (m of water of density `density`) in a message: in this unit, as a
    /// model file writes it ([`shown`]), with the unit's label.
    pub fn shown_head(self, head: f64, density: f64) -> String {
        format!("{} {}", shown(self.from_head(head, density)), self.label())
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

/// A quantity as a model's units express it: what a [`Converter`] converts and labels.
///
/// The match in each method is exhaustive, so a new quantity cannot be added without saying how
/// it converts and what its label is.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Quantity {
    /// Lengths, elevations, heads, levels and head losses: m; the length unit.
    Length,
    /// Pipe and valve diameters: m; the diameter unit.
    Diameter,
    /// Flows and demands: m³/s; the flow unit.
    Flow,
    /// Pressures: inside, pressure head in m of the model's water; the pressure unit.
    Pressure,
    /// Velocities: m/s; the length unit per second.
    Velocity,
    /// A pipe's roughness as its friction formula reads it: the Hazen–Williams coefficient C (no
    /// unit), or the absolute roughness under Darcy–Weisbach (m; the roughness unit).
    PipeRoughness,
    /// Power: W; kW, or hp when lengths are in feet.
    Power,
    /// Volumes: m³; the length unit cubed.
    Volume,
    /// Head loss per length: m/m; per 1000 of the length unit (m/km, ft/kft).
    Gradient,
    /// Durations such as water age: s; hours.
    Age,
    /// A loss coefficient K (a throttle valve's setting): no unit, labelled "K".
    LossCoefficient,
    /// Numbers without a unit (speeds, counts, ratios): unchanged, no label.
    Number,
}

/// Converts values between SI and one model's units: built once from the model's unit system,
/// its water's density (pressures are carried as head of that water) and its friction formula
/// (which decides what a pipe roughness is). Every writer, the reader of values given in the
/// model's units, the C library and the criteria convert through it.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Converter {
    /// The model's unit system.
    pub units: UnitSystem,
    /// Density of the model's water, kg/m³.
    pub density: f64,
    /// Whether pipe roughness is the Hazen–Williams coefficient C (else an absolute roughness).
    pub roughness_is_coefficient: bool,
}

impl Converter {
    /// A converter for `units`, water of `density` (kg/m³), and pipe roughness given as the
    /// Hazen–Williams C (`roughness_is_coefficient`) or as an absolute roughness.
    pub fn new(units: UnitSystem, density: f64, roughness_is_coefficient: bool) -> Self {
        Converter { units, density, roughness_is_coefficient }
    }

    /// `value` of quantity `q` given in the model's units, in SI.
    pub fn to_si(&self, q: Quantity, value: f64) -> f64 {
        let u = &self.units;
        match q {
            Quantity::Length | Quantity::Velocity => u.length.to_si(value),
            Quantity::Diameter => u.diameter.to_si(value),
            Quantity::Flow => u.flow.to_si(value),
            Quantity::Pressure => u.pressure.to_head(value, self.density),
            Quantity::PipeRoughness if self.roughness_is_coefficient => value,
            Quantity::PipeRoughness => u.roughness.to_si(value),
            Quantity::Power if u.is_us_customary() => value * HORSEPOWER,
            Quantity::Power => value * 1e3,
            Quantity::Volume => value * u.length.to_si(1.0).powi(3),
            Quantity::Gradient => value / 1000.0,
            Quantity::Age => value * 3600.0,
            Quantity::LossCoefficient | Quantity::Number => value,
        }
    }

    /// `value` of quantity `q` in SI, in the model's units.
    pub fn from_si(&self, q: Quantity, value: f64) -> f64 {
        let u = &self.units;
        match q {
            Quantity::Length | Quantity::Velocity => u.length.from_si(value),
            Quantity::Diameter => u.diameter.from_si(value),
            Quantity::Flow => u.flow.from_si(value),
            Quantity::Pressure => u.pressure.from_head(value, self.density),
            Quantity::PipeRoughness if self.roughness_is_coefficient => value,
            Quantity::PipeRoughness => u.roughness.from_si(value),
            Quantity::Power if u.is_us_customary() => value / HORSEPOWER,
            Quantity::Power => value / 1e3,
            Quantity::Volume => value / u.length.to_si(1.0).powi(3),
            Quantity::Gradient => value * 1000.0,
            Quantity::Age => value / 3600.0,
            Quantity::LossCoefficient | Quantity::Number => value,
        }
    }

    /// The label of quantity `q` in the model's units ("" for a number without unit).
    pub fn label(&self, q: Quantity) -> &'static str {
        let u = &self.units;
        match q {
            Quantity::Length => u.length.label(),
            Quantity::Velocity => u.velocity_label(),
            Quantity::Diameter => u.diameter.label(),
            Quantity::Flow => u.flow.label(),
            Quantity::Pressure => u.pressure.label(),
            Quantity::PipeRoughness if self.roughness_is_coefficient => "",
            Quantity::PipeRoughness => u.roughness.label(),
            Quantity::Power if u.is_us_customary() => "hp",
            Quantity::Power => "kW",
            Quantity::Volume => match u.length {
                LengthUnit::Metre => "m3",
                LengthUnit::Foot => "ft3",
            },
            Quantity::Gradient => match u.length {
                LengthUnit::Metre => "m/km",
                LengthUnit::Foot => "ft/kft",
            },
            Quantity::Age => "h",
            Quantity::LossCoefficient => "K",
            Quantity::Number => "",
        }
    }
}

/// A value in a message, in the unit the model file wrote it: at most six decimals, trailing
/// zeros dropped (a value converted back from SI may differ from the written one in its last
/// bits: 10 kPa came back as 9.999999999999998).
pub fn shown(value: f64) -> String {
    let text = format!("{value:.6}");
    if text.contains('.') {
        text.trim_end_matches('0').trim_end_matches('.').to_owned()
    } else {
        text
    }
}

/// The suggestion of an error message for a misspelt name: ` (did you mean 'x'?)` with the
/// closest accepted name (see [`suggest`]), or an empty string when none is close. `quote` is
/// the quotation mark the message uses around names (`'` or `"`).
pub fn did_you_mean<'a>(given: &str, choices: impl IntoIterator<Item = &'a str>, quote: char) -> String {
    suggest(given, choices).map(|s| format!(" (did you mean {quote}{s}{quote}?)")).unwrap_or_default()
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

    /// Every quantity, for the exhaustive checks below.
    const QUANTITIES: [Quantity; 12] = [
        Quantity::Length,
        Quantity::Diameter,
        Quantity::Flow,
        Quantity::Pressure,
        Quantity::Velocity,
        Quantity::PipeRoughness,
        Quantity::Power,
        Quantity::Volume,
        Quantity::Gradient,
        Quantity::Age,
        Quantity::LossCoefficient,
        Quantity::Number,
    ];

    #[test]
    fn converter_round_trips_every_quantity_and_uses_the_exact_factors() {
        let us = UnitSystem {
            length: LengthUnit::Foot,
            diameter: DiameterUnit::Inch,
            flow: FlowUnit::GallonPerMinute,
            pressure: PressureUnit::Psi,
            roughness: RoughnessUnit::Foot,
        };
        // 998.2 kg/m³: water at 20 °C (IAPWS-IF97, rounded; any density serves the round trip).
        for c in [Converter::new(us, 998.2, false), Converter::new(UnitSystem::default(), 998.2, true)] {
            for q in QUANTITIES {
                for v in [0.0, 1.5, -3.25, 1234.5] {
                    let back = c.from_si(q, c.to_si(q, v));
                    assert!((back - v).abs() <= 1e-12 * v.abs().max(1.0), "{q:?}: {v} -> {back}");
                }
            }
        }
        let c = Converter::new(us, 998.2, false);
        // 1 ft = 0.3048 m exactly (international foot); 1 in = 0.0254 m exactly; 1 hp
        // (mechanical, 550 ft·lbf/s) = 745.69987158227022 W; 1 US gal = 3.785411784 L exactly.
        assert_eq!(c.to_si(Quantity::Length, 1.0), 0.3048);
        assert_eq!(c.to_si(Quantity::Diameter, 1.0), 0.0254);
        assert!((c.to_si(Quantity::Power, 1.0) - 745.699_871_582_270_2).abs() < 1e-9);
        assert!((c.to_si(Quantity::Volume, 1.0) - 0.3048_f64.powi(3)).abs() < 1e-15);
        assert!((c.to_si(Quantity::Flow, 1.0) - 3.785_411_784e-3 / 60.0).abs() < 1e-15);
        // Pressure as head of the model's water: 1 psi / (ρ g).
        assert!((c.to_si(Quantity::Pressure, 1.0) - PSI / (998.2 * GRAVITY)).abs() < 1e-12);
        assert_eq!(c.label(Quantity::Power), "hp");
        assert_eq!(c.label(Quantity::Volume), "ft3");
        assert_eq!(c.label(Quantity::Gradient), "ft/kft");
        assert_eq!(c.label(Quantity::LossCoefficient), "K");
        // Under Hazen–Williams a pipe's roughness is C, a number without unit.
        let hw = Converter::new(us, 998.2, true);
        assert_eq!(hw.to_si(Quantity::PipeRoughness, 120.0), 120.0);
        assert_eq!(hw.label(Quantity::PipeRoughness), "");
        assert_eq!(c.to_si(Quantity::PipeRoughness, 1.0), 0.3048);
    }

    #[test]
    fn did_you_mean_quotes_the_closest_name_or_says_nothing() {
        assert_eq!(did_you_mean("diamter", ["diameter", "length"], '\''), " (did you mean 'diameter'?)");
        assert_eq!(did_you_mean("lenght", ["diameter", "length"], '"'), " (did you mean \"length\"?)");
        assert_eq!(did_you_mean("colour", ["diameter", "length"], '\''), "");
    }

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
