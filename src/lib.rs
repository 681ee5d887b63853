//! cavern application library: configuration, runs, reports and result files. The `cavern`
//! binary is a thin wrapper around [`cli::main`].

pub mod budget;
pub mod cli;
pub mod clicks;
pub mod compare;
pub mod config;
pub mod h5in;
pub mod h5out;
pub mod output;
pub mod plot;
pub mod recall;
pub mod report;
pub mod run;
pub mod scan;
pub mod units;

/// An application failure, classified by exit code.
#[derive(Debug, thiserror::Error)]
pub enum AppError {
    /// Bad input (config, memory guard): exit code 2.
    #[error("{0}")]
    Input(String),
    /// A failure while running (solver, I/O): exit code 1.
    #[error("{0}")]
    Runtime(String),
}

impl AppError {
    /// The process exit code: 2 for bad input, 1 for runtime failures.
    pub fn exit_code(&self) -> i32 {
        match self {
            AppError::Input(_) => 2,
            AppError::Runtime(_) => 1,
        }
    }
}
