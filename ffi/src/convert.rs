//! Conversions between the core's SI values and the model's own units, the units every value
//! crossing the boundary is in.
//!
//! These are the conversions of the command-line program's results (`src/report.rs`) and of the
//! model reader and writer: lengths, heads, levels and head losses in the length unit; velocities
//! in the length unit per second; diameters in the diameter unit; flows and demands in the flow
//! unit; pressures in the pressure unit (through the density of the model's water); pipe roughness
//! as the Hazen–Williams C, or in the roughness unit under Darcy–Weisbach; pump power in kW, or hp
//! when lengths are in feet; efficiencies in percent; valve settings as a pressure, a flow or a
//! loss coefficient by valve type.

use ringmain_core::model::ValveType;
use ringmain_core::units::HORSEPOWER;
use ringmain_core::{HeadLossLaw, Model, UnitSystem};

/// The units of one model, with the water density its pressure units need.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Units {
    /// The model's unit system.
    pub system: UnitSystem,
    /// The model's friction law (it decides the meaning of roughness).
    pub headloss: HeadLossLaw,
    /// Density of the model's water, kg/m³.
    pub density: f64,
}

impl Units {
    /// The units of `model`.
    pub fn of(model: &Model) -> Self {
        Units {
            system: model.units,
            headloss: model.options.headloss,
            density: model.options.water_properties().density,
        }
    }

    /// Length (elevation, head, level, head loss, pipe length) from SI.
    pub fn length_out(&self, v: f64) -> f64 {
        self.system.length.from_si(v)
    }
    /// Length into SI.
    pub fn length_in(&self, v: f64) -> f64 {
        self.system.length.to_si(v)
    }
    /// Diameter from SI.
    pub fn diameter_out(&self, v: f64) -> f64 {
        self.system.diameter.from_si(v)
    }
    /// Diameter into SI.
    pub fn diameter_in(&self, v: f64) -> f64 {
        self.system.diameter.to_si(v)
    }
    /// Flow from SI.
    pub fn flow_out(&self, v: f64) -> f64 {
        self.system.flow.from_si(v)
    }
    /// Flow into SI.
    pub fn flow_in(&self, v: f64) -> f64 {
        self.system.flow.to_si(v)
    }
    /// Pressure from pressure head in m.
    pub fn pressure_out(&self, head: f64) -> f64 {
        self.system.pressure.from_head(head, self.density)
    }
    /// Pressure into pressure head in m.
    pub fn pressure_in(&self, v: f64) -> f64 {
        self.system.pressure.to_head(v, self.density)
    }
    /// Pipe roughness from the core's value.
    pub fn roughness_out(&self, v: f64) -> f64 {
        match self.headloss {
            HeadLossLaw::HazenWilliams => v,
            HeadLossLaw::DarcyWeisbach => self.system.roughness.from_si(v),
        }
    }
    /// Pipe roughness into the core's value.
    pub fn roughness_in(&self, v: f64) -> f64 {
        match self.headloss {
            HeadLossLaw::HazenWilliams => v,
            HeadLossLaw::DarcyWeisbach => self.system.roughness.to_si(v),
        }
    }
    /// Power from W.
    pub fn power_out(&self, watts: f64) -> f64 {
        if self.system.is_us_customary() {
            watts / HORSEPOWER
        } else {
            watts / 1e3
        }
    }
    /// Power into W.
    pub fn power_in(&self, v: f64) -> f64 {
        if self.system.is_us_customary() {
            v * HORSEPOWER
        } else {
            v * 1e3
        }
    }
    /// A valve setting from the core's value.
    pub fn setting_out(&self, valve: ValveType, v: f64) -> f64 {
        match valve {
            ValveType::PressureReducing | ValveType::PressureSustaining => self.pressure_out(v),
            ValveType::FlowControl => self.flow_out(v),
            ValveType::Throttle => v,
        }
    }
    /// A valve setting into the core's value.
    pub fn setting_in(&self, valve: ValveType, v: f64) -> f64 {
        match valve {
            ValveType::PressureReducing | ValveType::PressureSustaining => self.pressure_in(v),
            ValveType::FlowControl => self.flow_in(v),
            ValveType::Throttle => v,
        }
    }
    /// Label of the power unit.
    pub fn power_label(&self) -> &'static str {
        if self.system.is_us_customary() {
            "hp"
        } else {
            "kW"
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ringmain_core::units::{FlowUnit, LengthUnit, PressureUnit};

    #[test]
    fn conversions_round_trip() {
        let mut model = Model::default();
        model.units.length = LengthUnit::Foot;
        model.units.flow = FlowUnit::GallonPerMinute;
        model.units.pressure = PressureUnit::Psi;
        model.options.headloss = HeadLossLaw::DarcyWeisbach;
        let u = Units::of(&model);
        for v in [0.0, 1.5, -3.25, 1234.5] {
            assert!((u.length_out(u.length_in(v)) - v).abs() < 1e-12);
            assert!((u.flow_out(u.flow_in(v)) - v).abs() < 1e-9);
            assert!((u.pressure_out(u.pressure_in(v)) - v).abs() < 1e-9);
            assert!((u.roughness_out(u.roughness_in(v)) - v).abs() < 1e-12);
            assert!((u.power_out(u.power_in(v)) - v).abs() < 1e-9);
            for &valve in ValveType::ALL {
                assert!((u.setting_out(valve, u.setting_in(valve, v)) - v).abs() < 1e-9);
            }
        }
        // 1 ft = 0.3048 m exactly (international foot); 1 hp = 745.699872 W (mechanical).
        assert!((u.length_in(1.0) - 0.3048).abs() < 1e-15);
        assert!((u.power_in(1.0) - 745.699_871_582_270_2).abs() < 1e-9);
        assert_eq!(u.power_label(), "hp");
    }
}
