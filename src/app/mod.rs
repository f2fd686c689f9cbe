//! The program around the pipeline: the command line, the service loop and its signals, the
//! health and metrics endpoint, logging, and the embedded demo with its plant simulator.

pub mod audit;
pub mod cli;
pub mod commands;
pub mod demo;
pub mod http;
pub mod logging;
pub mod notify;
pub mod replay;
pub mod service;
pub mod signals;
pub mod sim;
