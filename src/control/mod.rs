//! Controllers and motion profiles (stub: the control work replaces this file).
#![allow(missing_docs)]
use crate::config::ControllerConfig;

#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub struct Setpoint {
    pub position: f64,
    pub velocity: f64,
    pub acceleration: f64,
}

#[derive(Debug, Clone)]
pub struct Controller {}

impl Controller {
    pub fn new(_cfg: &ControllerConfig) -> Self {
        todo!()
    }
    pub fn update(&mut self, _sp: &Setpoint, _position: f64, _dt: f64) -> f64 {
        todo!()
    }
    pub fn reset(&mut self, _position: f64) {
        todo!()
    }
    pub fn set_config(&mut self, _cfg: &ControllerConfig) {
        todo!()
    }
    pub fn config(&self) -> &ControllerConfig {
        todo!()
    }
}

#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Trapezoid {}

impl Trapezoid {
    pub fn plan(_p0: f64, _v0: f64, _goal: f64, _v_max: f64, _a_max: f64) -> Self {
        todo!()
    }
    pub fn stop(_p0: f64, _v0: f64, _a_max: f64) -> Self {
        todo!()
    }
    pub fn sample(&self, _t: f64) -> Setpoint {
        todo!()
    }
    pub fn duration(&self) -> f64 {
        todo!()
    }
    pub fn goal(&self) -> f64 {
        todo!()
    }
}
