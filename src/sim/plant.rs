//! Plant model (stub: the simulator work replaces this file).
#![allow(missing_docs)]
use crate::config::PlantParams;

#[derive(Debug, Clone, Default, PartialEq)]
pub struct PlantFaults {
    pub reversed_motor: bool,
    pub blocked: bool,
    pub belt_slip: f64,
    pub encoder_offset_counts: i64,
}

#[derive(Debug, Clone)]
pub struct Plant {
    pub faults: PlantFaults,
}

impl Plant {
    pub fn new(_p: &PlantParams) -> Self {
        todo!()
    }
    pub fn step(&mut self, _duty: f64, _h: f64) {
        todo!()
    }
    pub fn position_mm(&self) -> f64 {
        todo!()
    }
    pub fn velocity_mm_s(&self) -> f64 {
        todo!()
    }
    pub fn encoder_count(&self) -> i64 {
        todo!()
    }
    pub fn current_a(&self) -> f64 {
        todo!()
    }
    pub fn at_hard_stop(&self) -> bool {
        todo!()
    }
    pub fn home_switch(&self) -> bool {
        todo!()
    }
    pub fn index_pulse(&self) -> bool {
        todo!()
    }
    pub fn counts_per_mm(&self) -> f64 {
        todo!()
    }
}
