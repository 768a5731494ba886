//! isotint as a program: command line, storage and HTTP service around the measurement core
//! (`isotint-core`).
//!
//! Pixel convention everywhere: x to the right, y down; pixel (x, y) covers [x, x+1) × [y, y+1).

pub mod access;
pub mod backup;
pub mod calibration_sets;
pub mod cli;
pub mod client;
pub mod config;
pub mod domain;
pub mod http;
pub mod pipeline;
pub mod service;
pub mod storage;
