//! The Python package's native module (`ratepool._native`): it takes a
//! table through the Arrow C stream interface (the PyCapsule protocol that
//! pyarrow, polars and pandas frames offer), runs the command line's own
//! `fit` or `score` on it with the interpreter released, and hands back the
//! summary as JSON. The options are the command line's, parsed by its own
//! definition, so every option means the same here; the Python layer
//! (`python/ratepool/`) names them as keywords and reads the output table.

use arrow_array::ffi_stream::{FFI_ArrowArrayStream, RecordBatchStreamReader};
use arrow_array::{RecordBatch, RecordBatchReader};
use clap::{ArgAction, CommandFactory, Parser};
use pyo3::exceptions::PyException;
use pyo3::prelude::*;
use pyo3::types::{PyCapsule, PyCapsuleMethods};
use ratepool::cli::Cli;
use ratepool::error::Error;
use ratepool::pipeline::{MemoryTable, PhaseEnd, RowsThrough, RunObserver};
use ratepool::progress::Terminal;
use std::sync::Arc;

pyo3::create_exception!(
    _native,
    EngineError,
    PyException,
    "A run that ended with an error: args are (kind, message, row, column, reason)."
);

/// The batches of an object that offers `__arrow_c_stream__`, read whole
/// (the columns are shared with the producer, not copied), with the column
/// names of its schema.
fn import_stream(data: &Bound<'_, PyAny>) -> PyResult<(Vec<String>, Vec<RecordBatch>)> {
    let capsule = data.call_method0("__arrow_c_stream__")?;
    let capsule = capsule.cast::<PyCapsule>()?;
    let pointer = capsule.pointer_checked(Some(c"arrow_array_stream"))?;
    // SAFETY: the capsule holds an ArrowArrayStream by the PyCapsule protocol
    // (its name was checked above); `from_raw` moves the stream out and leaves
    // a released one behind, so the capsule's destructor does not free it twice.
    let reader =
        unsafe { RecordBatchStreamReader::from_raw(pointer.as_ptr().cast::<FFI_ArrowArrayStream>()) }
            .map_err(|e| EngineError::new_err(("input", format!("cannot read the Arrow stream: {e}"))))?;
    let columns = reader.schema().fields().iter().map(|f| f.name().clone()).collect();
    let batches = reader
        .collect::<Result<Vec<_>, _>>()
        .map_err(|e| EngineError::new_err(("input", format!("cannot read the Arrow stream: {e}"))))?;
    Ok((columns, batches))
}

/// The observer of a run from Python: it shows what the command line would
/// when asked (`progress`, `timings`, `log_format`), and at every batch and
/// phase lets the interpreter run its signal handlers, so Ctrl-C (a
/// KeyboardInterrupt) stops the run before anything is written.
struct PythonObserver {
    terminal: Option<Terminal>,
    interrupt: Option<PyErr>,
}

impl RunObserver for PythonObserver {
    fn phase_ended(&mut self, phase: &PhaseEnd<'_>) {
        if let Some(terminal) = &mut self.terminal {
            terminal.phase_ended(phase);
        }
    }

    fn rows_through(&mut self, rows: &RowsThrough<'_>) {
        if let Some(terminal) = &mut self.terminal {
            terminal.rows_through(rows);
        }
    }

    fn keep_going(&mut self) -> bool {
        match Python::attach(|py| py.check_signals()) {
            Ok(()) => true,
            Err(interrupt) => {
                self.interrupt = Some(interrupt);
                false
            }
        }
    }
}

/// An engine error as the Python exception the package maps by its kind.
fn engine_error(error: Error) -> PyErr {
    let message = error.to_string();
    let none = (None::<usize>, None::<String>, None::<String>);
    let (kind, (row, column, reason)) = match error {
        Error::InvalidRow { row, column, reason, .. } => {
            ("invalid_row", (Some(row), Some(column), Some(reason)))
        }
        Error::Usage(_) => ("usage", none),
        Error::Input(_) => ("input", none),
        Error::Fit(_) => ("fit", none),
        Error::Io { .. } => ("io", none),
        Error::Interrupted => ("interrupted", none),
        _ => ("other", none),
    };
    EngineError::new_err((kind, message, row, column, reason))
}

/// Runs the command line `argv` (without the program name). With `data`,
/// the run reads that table in place of its `--input` file, and messages
/// call it `name`. Returns the summary as JSON (null for a command that
/// writes none), and the files written.
#[pyfunction]
#[pyo3(signature = (argv, data=None, name="data"))]
fn run(
    py: Python<'_>,
    argv: Vec<String>,
    data: Option<&Bound<'_, PyAny>>,
    name: &str,
) -> PyResult<(String, Vec<String>)> {
    let cli = Cli::try_parse_from(std::iter::once("ratepool".to_string()).chain(argv))
        .map_err(|e| engine_error(Error::Usage(ratepool::cli::clap_message(&e))))?;
    let memory = match data {
        Some(data) => {
            let (columns, batches) = import_stream(data)?;
            Some(Arc::new(MemoryTable::new(name, columns, batches).map_err(engine_error)?))
        }
        None => None,
    };
    let options = cli.run_options();
    let watch = cli.watch();
    let asked = options.progress || options.timings || options.json();
    let mut observer = PythonObserver { terminal: asked.then(|| Terminal::new(watch)), interrupt: None };
    let threads = options.threads;
    let command = cli.command;
    let outcome = py.detach(|| match threads {
        Some(threads) => rayon::ThreadPoolBuilder::new()
            .num_threads(threads.max(1))
            .build()
            .map_err(|e| Error::Other(format!("cannot start {threads} threads: {e}")))
            .and_then(|pool| pool.install(|| command.execute_with(memory, &mut observer))),
        None => command.execute_with(memory, &mut observer),
    });
    if let Some(interrupt) = observer.interrupt.take() {
        return Err(interrupt);
    }
    let outcome = outcome.map_err(engine_error)?;
    let outputs = outcome.outputs.iter().map(|p| p.display().to_string()).collect();
    let json = match (&outcome.summary, &outcome.levels) {
        (Some(summary), _) => serde_json::to_string(summary),
        (None, Some(levels)) => serde_json::to_string(levels),
        (None, None) => Ok("null".to_string()),
    }
    .map_err(|e| EngineError::new_err(("other", format!("cannot write the summary: {e}"))))?;
    Ok((json, outputs))
}

/// The long options of a subcommand (`fit` or `score`) as the command line
/// defines them: (name, how it is given: "flag", "value" or "list", the
/// value's placeholder, the values it may take when they are few, one line of help).
#[pyfunction]
fn options(subcommand: &str) -> PyResult<Vec<OptionSpec>> {
    let command = Cli::command();
    let sub = command
        .find_subcommand(subcommand)
        .ok_or_else(|| EngineError::new_err(("usage", format!("no subcommand '{subcommand}'"))))?;
    Ok(sub
        .get_arguments()
        .filter(|arg| !arg.is_hide_set())
        .filter_map(|arg| {
            let long = arg.get_long()?.to_string();
            let kind = match arg.get_action() {
                ArgAction::SetTrue | ArgAction::SetFalse => "flag",
                _ if arg.get_value_delimiter().is_some() => "list",
                _ => "value",
            };
            let takes_value = kind != "flag";
            let placeholder = arg.get_value_names().and_then(|names| names.first()).map(|n| n.to_string());
            let placeholder = placeholder.filter(|_| takes_value);
            let choices = arg.get_possible_values().into_iter().map(|v| v.get_name().to_string());
            let choices = choices.filter(|_| takes_value).collect();
            let help = arg.get_help().map(|h| h.to_string()).unwrap_or_default();
            Some((long, kind.to_string(), placeholder.unwrap_or_default(), choices, help))
        })
        .collect())
}

/// One option: (name, kind, placeholder, choices, help).
type OptionSpec = (String, String, String, Vec<String>, String);

/// The models `fit` takes, by name.
#[pyfunction]
fn models() -> Vec<String> {
    let pairs = ratepool::pipeline::Model::ALL.iter().map(|m| m.name().to_string());
    pairs.chain(std::iter::once(ratepool::pipeline::levels::MODEL_NAME.to_string())).collect()
}

/// The native module.
#[pymodule]
fn _native(module: &Bound<'_, PyModule>) -> PyResult<()> {
    module.add("EngineError", module.py().get_type::<EngineError>())?;
    module.add_function(wrap_pyfunction!(run, module)?)?;
    module.add_function(wrap_pyfunction!(options, module)?)?;
    module.add_function(wrap_pyfunction!(models, module)?)?;
    Ok(())
}
