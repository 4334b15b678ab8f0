//! Python binding of lapse: one call from an Arrow record batch to the output
//! batch `lapse run` writes for the same rows.
//!
//! * Input: any object with `__arrow_c_array__` (the Arrow PyCapsule
//!   interface: a struct array whose fields are the columns). Imported through
//!   the Arrow C data interface without copying the numeric buffers.
//! * Shared inputs (kernels, Earth orientation, stations, clocks) load once
//!   per process and pipeline file (keyed by path and SHA-256 of its text).
//! * The GIL is released while computing; the thread pool is rayon's global
//!   one, so `RAYON_NUM_THREADS` is honoured.
//! * Errors are `lapse.LapseError` (a `ValueError`) with the message the CLI
//!   gives for an input file with the same content; a bad batch never brings
//!   the worker down.

use std::collections::HashMap;
use std::ffi::{CStr, c_void};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::{Arc, Mutex, OnceLock};

use lapse::commands::engine::BatchEngine;
use lapse::pipeline::PipelineFile;
use polars::prelude::{CompatLevel, DataFrame};
use polars_arrow::array::{Array, StructArray};
use polars_arrow::datatypes::{ArrowDataType, Field as ArrowField};
use polars_arrow::ffi;
use pyo3::create_exception;
use pyo3::exceptions::{PyTypeError, PyValueError};
use pyo3::prelude::*;
use pyo3::types::PyTuple;

create_exception!(_lapse, LapseError, PyValueError, "An error of lapse (bad pipeline, bad input batch); the message is the CLI's.");

const SCHEMA_CAPSULE: &CStr = c"arrow_schema";
const ARRAY_CAPSULE: &CStr = c"arrow_array";

/// Engines by (canonical pipeline path, SHA-256 of its text): shared inputs
/// load once per process.
type EngineCache = Mutex<HashMap<(PathBuf, String), Arc<Mutex<BatchEngine>>>>;
static ENGINES: OnceLock<EngineCache> = OnceLock::new();
/// Pipelines loaded in this process (for tests of the load-once rule).
static LOADS: AtomicUsize = AtomicUsize::new(0);

fn lapse_err(e: impl std::fmt::Display) -> PyErr {
    LapseError::new_err(e.to_string())
}

/// The engine for a pipeline file, loading it on first use (GIL released).
fn engine(py: Python<'_>, pipeline: &Path) -> PyResult<Arc<Mutex<BatchEngine>>> {
    let file = PipelineFile::read(pipeline).map_err(lapse_err)?;
    let key = (std::fs::canonicalize(pipeline).unwrap_or_else(|_| pipeline.to_path_buf()), file.sha256.clone());
    let cache = ENGINES.get_or_init(Default::default);
    if let Some(e) = cache.lock().map_err(lapse_err)?.get(&key) {
        return Ok(e.clone());
    }
    let loaded = py.detach(|| BatchEngine::from_file(file)).map_err(lapse_err)?;
    LOADS.fetch_add(1, Ordering::Relaxed);
    let e = Arc::new(Mutex::new(loaded));
    cache.lock().map_err(lapse_err)?.insert(key, e.clone());
    Ok(e)
}

/// Imports a record batch through `__arrow_c_array__` into a DataFrame.
fn import_batch(obj: &Bound<'_, PyAny>) -> PyResult<DataFrame> {
    let py = obj.py();
    if !obj.hasattr("__arrow_c_array__")? {
        return Err(PyTypeError::new_err(format!("expected an Arrow record batch (an object with __arrow_c_array__, e.g. pyarrow.RecordBatch), got {}", obj.get_type().name()?)));
    }
    let pair = obj.call_method0("__arrow_c_array__")?;
    let pair = pair.cast::<PyTuple>().map_err(|_| PyTypeError::new_err("__arrow_c_array__ must return a (schema, array) tuple of capsules"))?;
    if pair.len() != 2 {
        return Err(PyTypeError::new_err("__arrow_c_array__ must return a (schema, array) tuple of capsules"));
    }
    let (schema_cap, array_cap) = (pair.get_item(0)?, pair.get_item(1)?);
    // SAFETY: PyCapsule_GetPointer checks the capsule type and name and sets
    // a Python error (returned below) when they do not match.
    let schema_ptr = unsafe { pyo3::ffi::PyCapsule_GetPointer(schema_cap.as_ptr(), SCHEMA_CAPSULE.as_ptr()) } as *const ffi::ArrowSchema;
    if schema_ptr.is_null() {
        return Err(PyErr::fetch(py));
    }
    let array_ptr = unsafe { pyo3::ffi::PyCapsule_GetPointer(array_cap.as_ptr(), ARRAY_CAPSULE.as_ptr()) } as *mut ffi::ArrowArray;
    if array_ptr.is_null() {
        return Err(PyErr::fetch(py));
    }
    // SAFETY: the capsules follow the Arrow PyCapsule interface: valid C data
    // interface structs. The array is moved out (its release callback now
    // ours; the capsule keeps a released, empty struct); the schema is read
    // in place and released by its capsule.
    let field = unsafe { ffi::import_field_from_c(&*schema_ptr) }.map_err(lapse_err)?;
    let ArrowDataType::Struct(_) = &field.dtype else {
        return Err(PyTypeError::new_err(format!("expected a record batch (struct array), got Arrow type {:?}", field.dtype)));
    };
    let c_array = unsafe { std::ptr::replace(array_ptr, ffi::ArrowArray::empty()) };
    let array = unsafe { ffi::import_array_from_c(c_array, field.dtype.clone()) }.map_err(lapse_err)?;
    let s = array.as_any().downcast_ref::<StructArray>().ok_or_else(|| PyTypeError::new_err("expected a record batch (struct array)"))?;
    if s.validity().is_some_and(|v| v.unset_bits() > 0) {
        return Err(PyTypeError::new_err("a record batch cannot have null rows at the top level"));
    }
    // Rebuilt without the (all-valid) top-level mask; a malformed import is
    // an error, not a panic.
    let s = StructArray::try_new(s.dtype().clone(), s.len(), s.values().to_vec(), None).map_err(lapse_err)?;
    DataFrame::try_from(s).map_err(lapse_err)
}

/// A result batch: exported once through `__arrow_c_array__`.
#[pyclass(module = "lapse._lapse", name = "ArrowBatch", frozen)]
struct ArrowBatch {
    c: Mutex<Option<(ffi::ArrowSchema, ffi::ArrowArray)>>,
    #[pyo3(get)]
    num_rows: usize,
    #[pyo3(get)]
    num_columns: usize,
}

/// Capsule destructor: drops the boxed C data interface struct, which calls
/// its release callback unless a consumer moved the data out.
unsafe extern "C" fn drop_capsule<T>(cap: *mut pyo3::ffi::PyObject) {
    // SAFETY: `cap` was made by `capsule::<T>` from a Box<T> under its name.
    unsafe {
        let p = pyo3::ffi::PyCapsule_GetPointer(cap, pyo3::ffi::PyCapsule_GetName(cap)) as *mut T;
        if p.is_null() {
            pyo3::ffi::PyErr_Clear();
        } else {
            drop(Box::from_raw(p));
        }
    }
}

fn capsule<T>(py: Python<'_>, value: T, name: &'static CStr) -> PyResult<Py<PyAny>> {
    let ptr = Box::into_raw(Box::new(value)) as *mut c_void;
    // SAFETY: ptr is a valid heap pointer owned by the capsule from here on
    // (freed by `drop_capsule::<T>`); name is 'static.
    let obj = unsafe { pyo3::ffi::PyCapsule_New(ptr, name.as_ptr(), Some(drop_capsule::<T>)) };
    if obj.is_null() {
        // SAFETY: the capsule was not created; reclaim the box.
        drop(unsafe { Box::from_raw(ptr as *mut T) });
        return Err(PyErr::fetch(py));
    }
    // SAFETY: obj is a new, owned reference.
    Ok(unsafe { Bound::from_owned_ptr(py, obj) }.unbind())
}

#[pymethods]
impl ArrowBatch {
    /// The Arrow PyCapsule interface (one export; a second call raises).
    #[pyo3(signature = (requested_schema=None))]
    fn __arrow_c_array__(&self, py: Python<'_>, requested_schema: Option<Py<PyAny>>) -> PyResult<(Py<PyAny>, Py<PyAny>)> {
        let _ = requested_schema; // the batch is given in its own schema
        let (schema, array) =
            self.c.lock().map_err(lapse_err)?.take().ok_or_else(|| PyValueError::new_err("this lapse batch was already exported; convert it once, e.g. pyarrow.record_batch(batch)"))?;
        Ok((capsule(py, schema, SCHEMA_CAPSULE)?, capsule(py, array, ARRAY_CAPSULE)?))
    }

    fn __repr__(&self) -> String {
        format!("lapse.ArrowBatch({} rows, {} columns)", self.num_rows, self.num_columns)
    }
}

/// Exports a DataFrame as one struct array, in the Arrow types `lapse run`
/// records in its Parquet files (strings as string views), so that a reader
/// of the CLI's files and a caller of the binding see the same schema.
fn export_frame(mut df: DataFrame) -> ArrowBatch {
    df.rechunk_mut(); // one chunk per column: chunk 0 is the whole column
    let compat = CompatLevel::newest();
    let fields: Vec<ArrowField> = df.columns().iter().map(|c| c.field().to_arrow(compat)).collect();
    let arrays: Vec<Box<dyn Array>> = df.columns().iter().map(|c| c.as_materialized_series().to_arrow(0, compat)).collect();
    let dtype = ArrowDataType::Struct(fields);
    let s = StructArray::new(dtype.clone(), df.height(), arrays, None);
    let field = ArrowField::new("".into(), dtype, false);
    ArrowBatch { c: Mutex::new(Some((ffi::export_field_to_c(&field), ffi::export_array_to_c(Box::new(s))))), num_rows: df.height(), num_columns: df.width() }
}

/// Runs a pipeline on one batch: returns (output, rejects) as ArrowBatch
/// objects. `source` names the batch in error messages (default "<batch>").
#[pyfunction]
#[pyo3(signature = (batch, pipeline, source=None))]
fn process(py: Python<'_>, batch: &Bound<'_, PyAny>, pipeline: PathBuf, source: Option<PathBuf>) -> PyResult<(ArrowBatch, ArrowBatch)> {
    let df = import_batch(batch)?;
    let engine = engine(py, &pipeline)?;
    let source = source.unwrap_or_else(|| PathBuf::from("<batch>"));
    let out = py.detach(move || {
        let mut e = engine.lock().map_err(|e| e.to_string())?;
        e.process(&df, &source).map_err(|e| e.to_string())
    });
    let out = out.map_err(LapseError::new_err)?;
    Ok((export_frame(out.output), export_frame(out.rejects)))
}

/// Imports a batch and exports it again without computing: the cost of the
/// binding itself (benches/binding.py).
#[pyfunction]
fn roundtrip(batch: &Bound<'_, PyAny>) -> PyResult<ArrowBatch> {
    Ok(export_frame(import_batch(batch)?))
}

/// Loads a pipeline's shared inputs now (otherwise on the first batch);
/// returns its kind.
#[pyfunction]
fn load(py: Python<'_>, pipeline: PathBuf) -> PyResult<String> {
    let e = engine(py, &pipeline)?;
    let kind = e.lock().map_err(lapse_err)?.pipeline().kind.clone();
    Ok(kind)
}

/// How many times this process has loaded a pipeline's shared inputs.
#[pyfunction]
fn engine_loads() -> usize {
    LOADS.load(Ordering::Relaxed)
}

/// Worker threads lapse uses in this process (RAYON_NUM_THREADS or all cores).
#[pyfunction]
fn threads() -> usize {
    rayon::current_num_threads()
}

#[pymodule]
fn _lapse(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add("__version__", lapse::VERSION)?;
    m.add("source_revision", lapse::pipeline::SOURCE_REVISION)?;
    m.add("LapseError", m.py().get_type::<LapseError>())?;
    m.add_class::<ArrowBatch>()?;
    m.add_function(wrap_pyfunction!(process, m)?)?;
    m.add_function(wrap_pyfunction!(load, m)?)?;
    m.add_function(wrap_pyfunction!(threads, m)?)?;
    m.add_function(wrap_pyfunction!(roundtrip, m)?)?;
    m.add_function(wrap_pyfunction!(engine_loads, m)?)?;
    Ok(())
}
