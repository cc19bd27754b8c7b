//! Python bindings for boxwood-core: the compiled module `boxwood._boxwood`.
//!
//! This layer only moves data: the Python package normalises dtypes and shapes and hands
//! over contiguous `float64`/`int64` arrays; here they are borrowed without copying, the GIL
//! is released for the engine's work in builds, batch calls (`*_many`), save, load and
//! `from_bytes`, not in the one-box calls (`count_one`, `count_plain`, `sum_one`,
//! `probe_one`), which hold it; the engine's answers come back as numpy arrays that own their
//! buffers. `from_bytes` copies its input into an aligned buffer.
//!
//! Arrays are borrowed, not copied, and calls that release the GIL read them while other
//! Python threads run: an array handed to a call must not be written by another thread (or
//! changed through another view of its memory) until the call returns. numpy cannot stop
//! that, so the answer would be computed from a mix of old and new values. A caller that
//! shares arrays with writing threads passes a copy (`arr.copy()`).
//!
//! A loaded tree's arrays look into the index file (memory-mapped or read into memory). A
//! load checks the count path at once; the cascade bits, row ids and weights are checked
//! before their first use, and a failed check raises the file's own error from that query.
//! Every call into the engine runs under `catch_unwind`, so a panic reaches Python as
//! `boxwood.InternalError`, never as an abort.

mod background;

use std::panic::{catch_unwind, AssertUnwindSafe};
use std::path::{Path, PathBuf};

use boxwood_core as core;
use boxwood_core::file::{self, FormatError, LoadError, LoadedTree, Verify};
use boxwood_core::{
    Axis, Bound as CoreBound, BoxBounds, Boxes, Column, CountedBoxes, Domain, Error, Group,
    Inclusive, KeyColumn, Layout, LevelWeights, OrderStats, RangeTree, StatValues, SumColumn,
    WeightColumn, WeightSum,
};
use numpy::{IntoPyArray, PyArray1, PyReadonlyArray1};
// The exceptions are named as `boxwood` exports them (not `_boxwood`), so that pickle finds
// them: an error raised in a worker process arrives as the same class.
use pyo3::create_exception;
use pyo3::exceptions::{PyOverflowError, PyRuntimeError, PyTypeError, PyValueError};
use pyo3::prelude::*;
use pyo3::sync::PyOnceLock;
use pyo3::types::{PyBytes, PyDict, PyFloat, PyInt, PyString, PyType};

create_exception!(
    boxwood,
    InternalError,
    PyRuntimeError,
    "A bug inside boxwood (a Rust panic), caught before it could crash the process."
);

create_exception!(
    boxwood,
    IndexFileError,
    PyValueError,
    "An index file (or pickled tree) that cannot be read back; the base of the other file errors."
);
create_exception!(
    boxwood,
    NotAnIndexFileError,
    IndexFileError,
    "The bytes are not a boxwood index file at all (wrong magic bytes)."
);
create_exception!(
    boxwood,
    UnsupportedIndexFileError,
    IndexFileError,
    "An index file of a newer format version, or written on a machine of the other byte order."
);
create_exception!(
    boxwood,
    TruncatedIndexFileError,
    IndexFileError,
    "An index file shorter than its header says: an interrupted copy or a full disk."
);
create_exception!(
    boxwood,
    ChecksumMismatchError,
    IndexFileError,
    "An index file whose header or a section does not match its checksum: damaged bytes."
);
create_exception!(
    boxwood,
    CorruptIndexFileError,
    IndexFileError,
    "An index file whose checksums hold but whose contents break the format's rules."
);

fn format_err(e: FormatError) -> PyErr {
    let msg = e.to_string();
    match e {
        FormatError::NotAnIndex => NotAnIndexFileError::new_err(msg),
        FormatError::UnsupportedVersion { .. } | FormatError::WrongByteOrder => {
            UnsupportedIndexFileError::new_err(msg)
        }
        FormatError::Truncated { .. } | FormatError::Empty => TruncatedIndexFileError::new_err(msg),
        FormatError::HeaderChecksum | FormatError::SectionChecksum { .. } => {
            ChecksumMismatchError::new_err(msg)
        }
        FormatError::TrailingBytes { .. } | FormatError::Corrupt(_) => {
            CorruptIndexFileError::new_err(msg)
        }
    }
}

/// An `OSError` of the right subclass carrying errno, message and file name, as Python's
/// own `open` raises it.
fn io_err(path: &Path, e: std::io::Error) -> PyErr {
    let code = e.raw_os_error();
    let text = e.to_string();
    let err = PyErr::from(e);
    let Some(code) = code else {
        return err;
    };
    let text = text
        .strip_suffix(&format!(" (os error {code})"))
        .unwrap_or(&text)
        .to_string();
    Python::attach(|py| {
        let args = (code, text, path.display().to_string());
        match err.get_type(py).call1(args) {
            Ok(value) => PyErr::from_value(value),
            Err(call_failed) => call_failed,
        }
    })
}

fn load_err(path: &Path, e: LoadError) -> PyErr {
    match e {
        LoadError::Io(io) => io_err(path, io),
        LoadError::Format(f) => format_err_in(path, f),
    }
}

/// The file's own error type, its message naming the file at `path`.
fn format_err_in(path: &Path, e: FormatError) -> PyErr {
    let err = format_err(e);
    Python::attach(|py| {
        let msg = format!("{}: {}", path.display(), err.value(py));
        PyErr::from_type(err.get_type(py), msg)
    })
}

/// Run a file operation, turning a panic into `InternalError`.
fn guarded_file<T: Send, E: Send>(
    f: impl FnOnce() -> Result<T, E> + Send,
    to_err: impl FnOnce(E) -> PyErr,
) -> PyResult<T> {
    match background::run(|| catch_unwind(AssertUnwindSafe(f))) {
        Ok(result) => result.map_err(to_err),
        Err(payload) => Err(panic_err(payload)),
    }
}

fn to_py_err(e: Error) -> PyErr {
    match e {
        Error::IndexFile { error, file: None } => format_err(error),
        Error::IndexFile {
            error,
            file: Some(path),
        } => format_err_in(&path, error),
        Error::SumOverflow { .. } => PyOverflowError::new_err(e.to_string()),
        _ => PyValueError::new_err(e.to_string()),
    }
}

/// Run engine code, turning a panic into `InternalError`.
fn guarded<T: Send>(f: impl FnOnce() -> Result<T, Error> + Send) -> PyResult<T> {
    guarded_file(f, to_py_err)
}

fn panic_err(payload: Box<dyn std::any::Any + Send>) -> PyErr {
    let msg = payload
        .downcast_ref::<&str>()
        .map(|s| s.to_string())
        .or_else(|| payload.downcast_ref::<String>().cloned())
        .unwrap_or_else(|| "unknown panic".to_string());
    InternalError::new_err(format!(
        "internal error in boxwood: {msg} (please report it)"
    ))
}

/// A contiguous 1-D float64 or int64 array borrowed from Python.
enum Numbers<'py> {
    F64(PyReadonlyArray1<'py, f64>),
    I64(PyReadonlyArray1<'py, i64>),
}

impl<'py> Numbers<'py> {
    fn extract(obj: &Bound<'py, PyAny>, what: &str) -> PyResult<Self> {
        if let Ok(a) = obj.extract::<PyReadonlyArray1<'py, f64>>() {
            return Ok(Numbers::F64(a));
        }
        if let Ok(a) = obj.extract::<PyReadonlyArray1<'py, i64>>() {
            return Ok(Numbers::I64(a));
        }
        Err(PyTypeError::new_err(format!(
            "{what} must be a 1-D float64 or int64 numpy array"
        )))
    }

    fn slices(&self, what: &str) -> PyResult<NumberSlice<'_>> {
        let err = |_| PyValueError::new_err(format!("{what} must be C-contiguous"));
        Ok(match self {
            Numbers::F64(a) => NumberSlice::F64(a.as_slice().map_err(err)?),
            Numbers::I64(a) => NumberSlice::I64(a.as_slice().map_err(err)?),
        })
    }
}

#[derive(Clone, Copy)]
enum NumberSlice<'a> {
    F64(&'a [f64]),
    I64(&'a [i64]),
}

impl<'a> NumberSlice<'a> {
    fn column(self) -> Column<'a> {
        match self {
            NumberSlice::F64(v) => Column::F64(v),
            NumberSlice::I64(v) => Column::I64(v),
        }
    }

    fn weights(self) -> WeightColumn<'a> {
        match self {
            NumberSlice::F64(v) => WeightColumn::F64(v),
            NumberSlice::I64(v) => WeightColumn::I64(v),
        }
    }
}

/// One scalar bound: a Python float or an int that fits in int64.
fn scalar_bound(obj: &Bound<'_, PyAny>) -> PyResult<CoreBound> {
    if let Ok(f) = obj.cast::<PyFloat>() {
        return Ok(CoreBound::F64(f.value()));
    }
    obj.extract::<i64>().map(CoreBound::I64)
}

/// numpy's float64 scalar type, looked up once.
static NUMPY_FLOAT64: PyOnceLock<Py<PyType>> = PyOnceLock::new();

/// A bound that is exactly a Python float or a numpy float64 (what a pandas row holds), or
/// exactly a Python int within int64; `None` for anything else.
#[inline]
fn plain_bound(obj: &Bound<'_, PyAny>) -> PyResult<Option<CoreBound>> {
    if let Ok(f) = obj.cast_exact::<PyFloat>() {
        return Ok(Some(CoreBound::F64(f.value())));
    }
    if obj.is_exact_instance_of::<PyInt>() {
        return Ok(obj.extract::<i64>().ok().map(CoreBound::I64));
    }
    let py = obj.py();
    let float64 = NUMPY_FLOAT64.get_or_try_init(py, || {
        py.import("numpy")?
            .getattr("float64")?
            .cast_into::<PyType>()
            .map(Bound::unbind)
            .map_err(PyErr::from)
    })?;
    if obj.get_type().is(float64.bind(py)) {
        // numpy.float64 subclasses float: its value is the double it holds.
        if let Ok(f) = obj.cast::<PyFloat>() {
            return Ok(Some(CoreBound::F64(f.value())));
        }
    }
    Ok(None)
}

fn parse_inclusive(s: &str) -> PyResult<Inclusive> {
    Inclusive::parse(s).map_err(to_py_err)
}

fn domain_name(d: Domain) -> &'static str {
    match d {
        Domain::F64 => "float64",
        Domain::I64 => "int64",
    }
}

/// The compiled range tree. Use `boxwood.RangeTree`, which wraps it.
#[pyclass(name = "_Tree", module = "boxwood._boxwood", frozen)]
struct PyTree {
    inner: RangeTree,
    /// Where the arrays live: "built", "memory-mapped file", "read from file" or "bytes".
    source: &'static str,
}

type PyPair<'py> = (Bound<'py, PyAny>, Bound<'py, PyAny>);

fn extremes_to_py<'py>(
    py: Python<'py>,
    extremes: Option<(CoreBound, CoreBound)>,
) -> PyResult<Option<PyPair<'py>>> {
    let one = |b: CoreBound| -> PyResult<Bound<'py, PyAny>> {
        Ok(match b {
            CoreBound::F64(v) => v.into_pyobject(py)?.into_any(),
            CoreBound::I64(v) => v.into_pyobject(py)?.into_any(),
        })
    };
    extremes
        .map(|(lo, hi)| Ok((one(lo)?, one(hi)?)))
        .transpose()
}

/// A loaded tree and its attachments as Python bytes.
fn loaded_to_py(
    py: Python<'_>,
    loaded: LoadedTree,
    source: &'static str,
) -> PyResult<(PyTree, Vec<Py<PyBytes>>)> {
    let attachments = loaded
        .attachments
        .iter()
        .map(|a| PyBytes::new(py, a).unbind())
        .collect();
    let tree = PyTree {
        inner: loaded.tree,
        source,
    };
    Ok((tree, attachments))
}

#[pymethods]
impl PyTree {
    /// With `keys` (uint32 codes, each below `key_count`), a keyed tree: every box then
    /// names the code whose points it asks.
    #[new]
    #[pyo3(signature = (x, y, weights=None, layout="fast", keys=None, key_count=0))]
    fn new(
        py: Python<'_>,
        x: &Bound<'_, PyAny>,
        y: &Bound<'_, PyAny>,
        weights: Option<&Bound<'_, PyAny>>,
        layout: &str,
        keys: Option<PyReadonlyArray1<'_, u32>>,
        key_count: usize,
    ) -> PyResult<Self> {
        let layout = parse_layout(layout)?;
        let x = Numbers::extract(x, "x")?;
        let y = Numbers::extract(y, "y")?;
        let w = weights
            .map(|w| Numbers::extract(w, "weights"))
            .transpose()?;
        let (xs, ys) = (x.slices("x")?, y.slices("y")?);
        let ws = w.as_ref().map(|w| w.slices("weights")).transpose()?;
        let codes = keys
            .as_ref()
            .map(|k| {
                k.as_slice()
                    .map_err(|_| PyValueError::new_err("keys must be C-contiguous"))
            })
            .transpose()?;
        let inner = py.detach(|| {
            guarded(|| {
                core::build_keyed(
                    xs.column(),
                    ys.column(),
                    ws.map(NumberSlice::weights),
                    codes.map(|codes| KeyColumn {
                        codes,
                        count: key_count,
                    }),
                    layout,
                )
            })
        })?;
        Ok(PyTree {
            inner,
            source: "built",
        })
    }

    /// Save as an index file at `path` (atomically: temporary file, sync, rename).
    fn save(&self, py: Python<'_>, path: PathBuf, attachments: Vec<Vec<u8>>) -> PyResult<()> {
        py.detach(|| guarded(|| self.inner.ensure_all()))?;
        py.detach(|| {
            let slices: Vec<&[u8]> = attachments.iter().map(Vec::as_slice).collect();
            guarded_file(
                || file::save(&self.inner, &slices, &path),
                |e| io_err(&path, e),
            )
        })
    }

    /// The index file's bytes, for pickling: written straight into the bytes object.
    fn to_bytes<'py>(
        &self,
        py: Python<'py>,
        attachments: Vec<Vec<u8>>,
    ) -> PyResult<Bound<'py, PyBytes>> {
        let slices: Vec<&[u8]> = attachments.iter().map(Vec::as_slice).collect();
        py.detach(|| guarded(|| self.inner.ensure_all()))?;
        let writer = py.detach(|| {
            guarded_file(|| file::IndexWriter::new(&self.inner, &slices), PyErr::from)
        })?;
        PyBytes::new_with(py, writer.len(), |buf| {
            py.detach(|| guarded_file(|| writer.write_into(buf), PyErr::from))
        })
    }

    /// Open an index file: `(tree, attachments)`. `verify` is "checksums" or "full".
    #[staticmethod]
    fn load(
        py: Python<'_>,
        path: PathBuf,
        mmap: bool,
        verify: &str,
    ) -> PyResult<(PyTree, Vec<Py<PyBytes>>)> {
        let verify = parse_verify(verify)?;
        let loaded =
            py.detach(|| guarded_file(|| file::open(&path, mmap, verify), |e| load_err(&path, e)))?;
        let source = if mmap {
            "memory-mapped file"
        } else {
            "read from file"
        };
        loaded_to_py(py, loaded, source)
    }

    /// Read an index from the bytes `to_bytes` made: `(tree, attachments)`.
    #[staticmethod]
    fn from_bytes(py: Python<'_>, data: &[u8]) -> PyResult<(PyTree, Vec<Py<PyBytes>>)> {
        let buffer = file::AlignedBytes::copy_of(data);
        let loaded = py.detach(|| guarded_file(|| file::read_index(buffer), format_err))?;
        loaded_to_py(py, loaded, "bytes")
    }

    /// `(min, max)` of x as engine scalars (float or int), or None for an empty tree.
    #[getter]
    fn x_extremes<'py>(&self, py: Python<'py>) -> PyResult<Option<PyPair<'py>>> {
        extremes_to_py(py, self.inner.x_extremes())
    }

    /// `(min, max)` of y as engine scalars (float or int), or None for an empty tree.
    #[getter]
    fn y_extremes<'py>(&self, py: Python<'py>) -> PyResult<Option<PyPair<'py>>> {
        extremes_to_py(py, self.inner.y_extremes())
    }

    /// Where the tree's arrays live.
    #[getter]
    fn source(&self) -> &'static str {
        self.source
    }

    /// The parts whose checks have run and held: the count path always (a load checks it),
    /// then "cascade bits", "row ids" and "weights" (those the tree has) once checked. A
    /// built tree has nothing left to check.
    #[getter]
    fn verified(&self) -> Vec<&'static str> {
        let has = |g: Group| g != Group::Weights || self.inner.weights().is_some();
        std::iter::once("count path")
            .chain(
                Group::ALL
                    .into_iter()
                    .filter(|&g| has(g) && self.inner.is_verified(g))
                    .map(Group::name),
            )
            .collect()
    }

    /// Check every part not yet checked (what a query of each kind would check first).
    fn verify_all(&self, py: Python<'_>) -> PyResult<()> {
        py.detach(|| guarded(|| self.inner.ensure_all()))
    }

    /// The points in row order, as the tree was built from them: `(x, y, weights, key
    /// codes)`, float64 or int64 arrays (weights and codes None when the tree has none).
    /// A growing tree rebuilds merged segments from them.
    #[allow(clippy::type_complexity)]
    fn columns<'py>(
        &self,
        py: Python<'py>,
    ) -> PyResult<(
        Bound<'py, PyAny>,
        Bound<'py, PyAny>,
        Option<Bound<'py, PyAny>>,
        Option<Bound<'py, PyArray1<u32>>>,
    )> {
        let c = py.detach(|| guarded(|| self.inner.columns()))?;
        let array = |v: core::Values| -> Bound<'py, PyAny> {
            match v {
                core::Values::F64(v) => v.into_pyarray(py).into_any(),
                core::Values::I64(v) => v.into_pyarray(py).into_any(),
            }
        };
        Ok((
            array(c.x),
            array(c.y),
            c.weights.map(array),
            c.keys.map(|k| k.into_pyarray(py)),
        ))
    }

    fn __len__(&self) -> usize {
        self.inner.len()
    }

    #[getter]
    fn height(&self) -> usize {
        self.inner.height()
    }

    #[getter]
    fn layout(&self) -> &'static str {
        self.inner.layout().name()
    }

    #[getter]
    fn nbytes(&self) -> usize {
        self.inner.nbytes()
    }

    #[getter]
    fn nbytes_by_part(&self) -> Vec<(&'static str, usize)> {
        self.inner.nbytes_by_part().to_vec()
    }

    #[getter]
    fn x_domain(&self) -> &'static str {
        domain_name(self.inner.x_domain())
    }

    #[getter]
    fn y_domain(&self) -> &'static str {
        domain_name(self.inner.y_domain())
    }

    /// "float64", "int64" or None.
    #[getter]
    fn weights_kind(&self) -> Option<&'static str> {
        self.inner.weights().map(|w| match w {
            LevelWeights::F64(_) => "float64",
            LevelWeights::I64(_) | LevelWeights::I128(_) => "int64",
        })
    }

    /// A keyed tree's key offsets (`K + 1` of them: code `k`'s points are x-ranks
    /// `offsets[k]..offsets[k + 1]`), or None for a tree built without keys.
    #[getter]
    fn key_offsets<'py>(&self, py: Python<'py>) -> Option<Bound<'py, PyArray1<u32>>> {
        self.inner
            .key_runs()
            .map(|runs| runs.starts().to_vec().into_pyarray(py))
    }

    #[getter]
    fn build_stats<'py>(&self, py: Python<'py>) -> PyResult<Bound<'py, PyDict>> {
        let s = self.inner.build_stats();
        let d = PyDict::new(py);
        d.set_item("presorts", s.presorts)?;
        d.set_item("merge_passes", s.merge_passes)?;
        d.set_item("elements_merged", s.elements_merged)?;
        Ok(d)
    }

    /// Count one box given as four Python scalars; `key` is the code of a keyed tree's box.
    #[pyo3(signature = (x_lo, x_hi, y_lo, y_hi, inclusive, key=None))]
    fn count_one(
        &self,
        x_lo: &Bound<'_, PyAny>,
        x_hi: &Bound<'_, PyAny>,
        y_lo: &Bound<'_, PyAny>,
        y_hi: &Bound<'_, PyAny>,
        inclusive: &str,
        key: Option<i64>,
    ) -> PyResult<usize> {
        let b = box_of(x_lo, x_hi, y_lo, y_hi)?;
        let inclusive = parse_inclusive(inclusive)?;
        guarded(|| self.inner.count_by(&b, key, inclusive))
    }

    /// Count one box if its bounds are four plain numbers (exactly Python floats, numpy
    /// float64s or Python ints within int64: not bool, not other numpy scalars or subclasses)
    /// and `inclusive` is a str; `None` otherwise, for the caller's general path. The scalar
    /// call from row-by-row code, with its type checks done here rather than in Python.
    fn count_plain(
        &self,
        x_lo: &Bound<'_, PyAny>,
        x_hi: &Bound<'_, PyAny>,
        y_lo: &Bound<'_, PyAny>,
        y_hi: &Bound<'_, PyAny>,
        inclusive: &Bound<'_, PyAny>,
    ) -> PyResult<Option<usize>> {
        let (Some(x_lo), Some(x_hi), Some(y_lo), Some(y_hi)) = (
            plain_bound(x_lo)?,
            plain_bound(x_hi)?,
            plain_bound(y_lo)?,
            plain_bound(y_hi)?,
        ) else {
            return Ok(None);
        };
        let Ok(inclusive) = inclusive.cast_exact::<PyString>() else {
            return Ok(None);
        };
        let inclusive = parse_inclusive(&inclusive.to_cow()?)?;
        let b = BoxBounds {
            x_lo,
            x_hi,
            y_lo,
            y_hi,
        };
        guarded(|| self.inner.count(&b, inclusive)).map(Some)
    }

    /// Sum one box's weights; a float or an int.
    #[pyo3(signature = (x_lo, x_hi, y_lo, y_hi, inclusive, key=None))]
    #[allow(clippy::too_many_arguments)]
    fn sum_one<'py>(
        &self,
        py: Python<'py>,
        x_lo: &Bound<'py, PyAny>,
        x_hi: &Bound<'py, PyAny>,
        y_lo: &Bound<'py, PyAny>,
        y_hi: &Bound<'py, PyAny>,
        inclusive: &str,
        key: Option<i64>,
    ) -> PyResult<Bound<'py, PyAny>> {
        let b = box_of(x_lo, x_hi, y_lo, y_hi)?;
        let inclusive = parse_inclusive(inclusive)?;
        if self.inner.weights().is_none() {
            return Err(to_py_err(Error::NoWeights));
        }
        match guarded(|| self.inner.sum_by(&b, key, inclusive))? {
            WeightSum::F64(v) => Ok(v.into_pyobject(py)?.into_any()),
            WeightSum::I64(v) => Ok(v.into_pyobject(py)?.into_any()),
        }
    }

    /// Diagnostic, for tests of the algorithm's operation counts: one box counted
    /// (`report=False`) or reported, and everything the engine read doing it (see
    /// `boxwood_core::Tally`): `{"count", "reads": [(part, first line, last line, bytes)],
    /// "nodes": per level, "canonical": per level}`, lines being addresses divided by 64.
    /// A report adds "rows", and "collect": the same dictionary of what collecting the rows
    /// under the canonical nodes read.
    #[pyo3(signature = (x_lo, x_hi, y_lo, y_hi, inclusive, report=false))]
    #[allow(clippy::too_many_arguments)] // the four bounds, as every one-box call takes them
    fn probe_one<'py>(
        &self,
        py: Python<'py>,
        x_lo: &Bound<'py, PyAny>,
        x_hi: &Bound<'py, PyAny>,
        y_lo: &Bound<'py, PyAny>,
        y_hi: &Bound<'py, PyAny>,
        inclusive: &str,
        report: bool,
    ) -> PyResult<Bound<'py, PyDict>> {
        let b = box_of(x_lo, x_hi, y_lo, y_hi)?;
        let inclusive = parse_inclusive(inclusive)?;
        if !report {
            let (count, tally) = guarded(|| self.inner.probe_count(&b, inclusive))?;
            let d = tally_to_py(py, &tally)?;
            d.set_item("count", count)?;
            return Ok(d);
        }
        let (rows, walk, collect) = guarded(|| self.inner.probe_report(&b, inclusive))?;
        let d = tally_to_py(py, &walk)?;
        d.set_item("count", rows.len())?;
        d.set_item("rows", rows)?;
        d.set_item("collect", tally_to_py(py, &collect)?)?;
        Ok(d)
    }

    /// Count a batch of boxes given as four equal-length 1-D arrays; `keys` (int64 codes,
    /// one a box) for a keyed tree.
    #[pyo3(signature = (x_lo, x_hi, y_lo, y_hi, inclusive, keys=None))]
    #[allow(clippy::too_many_arguments)]
    fn count_many<'py>(
        &self,
        py: Python<'py>,
        x_lo: &Bound<'py, PyAny>,
        x_hi: &Bound<'py, PyAny>,
        y_lo: &Bound<'py, PyAny>,
        y_hi: &Bound<'py, PyAny>,
        inclusive: &str,
        keys: Option<PyReadonlyArray1<'py, i64>>,
    ) -> PyResult<Bound<'py, PyArray1<i64>>> {
        let inclusive = parse_inclusive(inclusive)?;
        let cols = BoundArrays::extract(x_lo, x_hi, y_lo, y_hi)?;
        let boxes = cols.boxes()?;
        let keys = key_slice(keys.as_ref())?;
        let out = py.detach(|| {
            guarded(|| {
                let mut out = vec![0i64; boxes.validate()?];
                self.inner
                    .count_batch_by(&boxes, keys, inclusive, &mut out)?;
                Ok(out)
            })
        })?;
        Ok(out.into_pyarray(py))
    }

    /// Sum a batch of boxes: a float64 or int64 array.
    #[pyo3(signature = (x_lo, x_hi, y_lo, y_hi, inclusive, keys=None))]
    #[allow(clippy::too_many_arguments)]
    fn sum_many<'py>(
        &self,
        py: Python<'py>,
        x_lo: &Bound<'py, PyAny>,
        x_hi: &Bound<'py, PyAny>,
        y_lo: &Bound<'py, PyAny>,
        y_hi: &Bound<'py, PyAny>,
        inclusive: &str,
        keys: Option<PyReadonlyArray1<'py, i64>>,
    ) -> PyResult<Bound<'py, PyAny>> {
        let inclusive = parse_inclusive(inclusive)?;
        let cols = BoundArrays::extract(x_lo, x_hi, y_lo, y_hi)?;
        let boxes = cols.boxes()?;
        let keys = key_slice(keys.as_ref())?;
        let sums = py.detach(|| guarded(|| self.inner.sum_batch_by(&boxes, keys, inclusive)))?;
        Ok(match sums {
            SumColumn::F64(v) => v.into_pyarray(py).into_any(),
            SumColumn::I64(v) => v.into_pyarray(py).into_any(),
        })
    }

    /// Report a batch of boxes: (offsets, rows), CSR.
    #[allow(clippy::type_complexity)]
    /// With `ordered`, each box's rows ascending (each box sorted as it is filled, on all
    /// cores, GIL released).
    #[pyo3(signature = (x_lo, x_hi, y_lo, y_hi, inclusive, ordered=false, keys=None))]
    #[allow(clippy::too_many_arguments)]
    fn report_many<'py>(
        &self,
        py: Python<'py>,
        x_lo: &Bound<'py, PyAny>,
        x_hi: &Bound<'py, PyAny>,
        y_lo: &Bound<'py, PyAny>,
        y_hi: &Bound<'py, PyAny>,
        inclusive: &str,
        ordered: bool,
        keys: Option<PyReadonlyArray1<'py, i64>>,
    ) -> PyResult<(Bound<'py, PyArray1<i64>>, Bound<'py, PyArray1<i64>>)> {
        let inclusive = parse_inclusive(inclusive)?;
        let cols = BoundArrays::extract(x_lo, x_hi, y_lo, y_hi)?;
        let boxes = cols.boxes()?;
        let keys = key_slice(keys.as_ref())?;
        let report =
            py.detach(|| guarded(|| self.inner.report_batch_by(&boxes, keys, inclusive, ordered)))?;
        Ok((
            report.offsets.into_pyarray(py),
            report.rows.into_pyarray(py),
        ))
    }

    /// Order statistics of a batch on `axis` ("x" or "y"): `ranks` holds `per_box` ranks a
    /// box (0 the smallest, -1 the largest); `(values, found)`, flat, box-major.
    #[pyo3(signature = (x_lo, x_hi, y_lo, y_hi, inclusive, axis, ranks, per_box, keys=None))]
    #[allow(clippy::too_many_arguments)]
    fn kth_many<'py>(
        &self,
        py: Python<'py>,
        x_lo: &Bound<'py, PyAny>,
        x_hi: &Bound<'py, PyAny>,
        y_lo: &Bound<'py, PyAny>,
        y_hi: &Bound<'py, PyAny>,
        inclusive: &str,
        axis: &str,
        ranks: PyReadonlyArray1<'py, i64>,
        per_box: usize,
        keys: Option<PyReadonlyArray1<'py, i64>>,
    ) -> PyResult<(Bound<'py, PyAny>, Bound<'py, PyArray1<bool>>)> {
        let inclusive = parse_inclusive(inclusive)?;
        let axis = parse_axis(axis)?;
        let cols = BoundArrays::extract(x_lo, x_hi, y_lo, y_hi)?;
        let boxes = cols.boxes()?;
        let keys = key_slice(keys.as_ref())?;
        let ranks = ranks
            .as_slice()
            .map_err(|_| PyValueError::new_err("ranks must be C-contiguous"))?;
        if ranks.len() != boxes.x_lo.len() * per_box {
            return Err(PyValueError::new_err(format!(
                "{} ranks for {} boxes of {per_box} ranks each",
                ranks.len(),
                boxes.x_lo.len()
            )));
        }
        let stats = py.detach(|| {
            guarded(|| {
                self.inner
                    .kth_batch_by(&boxes, keys, inclusive, axis, ranks, per_box)
            })
        })?;
        Ok(stats_to_py(py, stats))
    }

    /// Count a batch for statistics of `axis`: `(counted, counts)`, the first to hand to
    /// `kth_counted` with ranks worked out from the second.
    #[pyo3(signature = (x_lo, x_hi, y_lo, y_hi, inclusive, axis, keys=None))]
    #[allow(clippy::too_many_arguments)]
    fn count_for_stats<'py>(
        &self,
        py: Python<'py>,
        x_lo: &Bound<'py, PyAny>,
        x_hi: &Bound<'py, PyAny>,
        y_lo: &Bound<'py, PyAny>,
        y_hi: &Bound<'py, PyAny>,
        inclusive: &str,
        axis: &str,
        keys: Option<PyReadonlyArray1<'py, i64>>,
    ) -> PyResult<(PyCounted, Bound<'py, PyArray1<i64>>)> {
        let inclusive = parse_inclusive(inclusive)?;
        let axis = parse_axis(axis)?;
        let cols = BoundArrays::extract(x_lo, x_hi, y_lo, y_hi)?;
        let boxes = cols.boxes()?;
        let keys = key_slice(keys.as_ref())?;
        let (counted, counts) = py.detach(|| {
            guarded(|| {
                let counted = self.inner.count_for_stats(&boxes, keys, inclusive, axis)?;
                let counts = counted.counts();
                Ok((counted, counts))
            })
        })?;
        Ok((PyCounted { inner: counted }, counts.into_pyarray(py)))
    }

    /// Order statistics of boxes counted by `count_for_stats` on this tree: `per_box` ranks a
    /// box, as `kth_many` takes them.
    fn kth_counted<'py>(
        &self,
        py: Python<'py>,
        counted: &PyCounted,
        ranks: PyReadonlyArray1<'py, i64>,
        per_box: usize,
    ) -> PyResult<(Bound<'py, PyAny>, Bound<'py, PyArray1<bool>>)> {
        let ranks = ranks
            .as_slice()
            .map_err(|_| PyValueError::new_err("ranks must be C-contiguous"))?;
        if ranks.len() != counted.inner.counts().len() * per_box {
            return Err(PyValueError::new_err(
                "kth_counted needs per_box ranks for every counted box",
            ));
        }
        let stats =
            py.detach(|| guarded(|| self.inner.kth_of_counted(&counted.inner, ranks, per_box)))?;
        Ok(stats_to_py(py, stats))
    }

    /// The rows of each box's `k` points with the smallest (or `largest`) values of `axis`,
    /// ascending: (offsets, rows), CSR.
    #[allow(clippy::type_complexity)]
    #[pyo3(signature = (x_lo, x_hi, y_lo, y_hi, inclusive, axis, k, largest, keys=None))]
    #[allow(clippy::too_many_arguments)]
    fn extreme_rows_many<'py>(
        &self,
        py: Python<'py>,
        x_lo: &Bound<'py, PyAny>,
        x_hi: &Bound<'py, PyAny>,
        y_lo: &Bound<'py, PyAny>,
        y_hi: &Bound<'py, PyAny>,
        inclusive: &str,
        axis: &str,
        k: PyReadonlyArray1<'py, u64>,
        largest: bool,
        keys: Option<PyReadonlyArray1<'py, i64>>,
    ) -> PyResult<(Bound<'py, PyArray1<i64>>, Bound<'py, PyArray1<i64>>)> {
        let inclusive = parse_inclusive(inclusive)?;
        let axis = parse_axis(axis)?;
        let cols = BoundArrays::extract(x_lo, x_hi, y_lo, y_hi)?;
        let boxes = cols.boxes()?;
        let keys = key_slice(keys.as_ref())?;
        let k = k
            .as_slice()
            .map_err(|_| PyValueError::new_err("k must be C-contiguous"))?;
        if k.len() != boxes.x_lo.len() {
            return Err(PyValueError::new_err(format!(
                "{} values of k for {} boxes",
                k.len(),
                boxes.x_lo.len()
            )));
        }
        let report = py.detach(|| {
            guarded(|| {
                self.inner
                    .extreme_rows_batch_by(&boxes, keys, inclusive, axis, k, largest)
            })
        })?;
        Ok((
            report.offsets.into_pyarray(py),
            report.rows.into_pyarray(py),
        ))
    }
}

/// A batch counted for statistics by `_Tree.count_for_stats`, for `_Tree.kth_counted`.
#[pyclass(name = "_Counted", module = "boxwood._boxwood", frozen)]
struct PyCounted {
    inner: CountedBoxes,
}

/// Order statistics as `(values, found)` numpy arrays.
fn stats_to_py(py: Python<'_>, stats: OrderStats) -> (Bound<'_, PyAny>, Bound<'_, PyArray1<bool>>) {
    let values = match stats.values {
        StatValues::F64(v) => v.into_pyarray(py).into_any(),
        StatValues::I64(v) => v.into_pyarray(py).into_any(),
    };
    (values, stats.found.into_pyarray(py))
}

fn parse_axis(axis: &str) -> PyResult<Axis> {
    match axis {
        "x" => Ok(Axis::X),
        "y" => Ok(Axis::Y),
        other => Err(PyValueError::new_err(format!(
            "of must be 'x' or 'y', got {other:?}"
        ))),
    }
}

/// A batch's key codes as a slice, if given.
fn key_slice<'a>(keys: Option<&'a PyReadonlyArray1<'_, i64>>) -> PyResult<Option<&'a [i64]>> {
    keys.map(|k| {
        k.as_slice()
            .map_err(|_| PyValueError::new_err("keys must be C-contiguous"))
    })
    .transpose()
}

fn box_of(
    x_lo: &Bound<'_, PyAny>,
    x_hi: &Bound<'_, PyAny>,
    y_lo: &Bound<'_, PyAny>,
    y_hi: &Bound<'_, PyAny>,
) -> PyResult<BoxBounds> {
    Ok(BoxBounds {
        x_lo: scalar_bound(x_lo)?,
        x_hi: scalar_bound(x_hi)?,
        y_lo: scalar_bound(y_lo)?,
        y_hi: scalar_bound(y_hi)?,
    })
}

/// The four bound arrays of a batch, borrowed from Python.
struct BoundArrays<'py>([Numbers<'py>; 4]);

impl<'py> BoundArrays<'py> {
    fn extract(
        x_lo: &Bound<'py, PyAny>,
        x_hi: &Bound<'py, PyAny>,
        y_lo: &Bound<'py, PyAny>,
        y_hi: &Bound<'py, PyAny>,
    ) -> PyResult<Self> {
        Ok(BoundArrays([
            Numbers::extract(x_lo, "x_lo")?,
            Numbers::extract(x_hi, "x_hi")?,
            Numbers::extract(y_lo, "y_lo")?,
            Numbers::extract(y_hi, "y_hi")?,
        ]))
    }

    fn boxes(&self) -> PyResult<Boxes<'_>> {
        let [a, b, c, d] = &self.0;
        Ok(Boxes {
            x_lo: a.slices("x_lo")?.column(),
            x_hi: b.slices("x_hi")?.column(),
            y_lo: c.slices("y_lo")?.column(),
            y_hi: d.slices("y_hi")?.column(),
        })
    }
}

/// A probe's tally as `{"reads": [(part, first line, last line, bytes)], "nodes",
/// "canonical"}`.
fn tally_to_py<'py>(py: Python<'py>, tally: &core::Tally) -> PyResult<Bound<'py, PyDict>> {
    let reads: Vec<(&str, usize, usize, usize)> = tally
        .reads
        .iter()
        .map(|r| {
            let (first, last) = r.lines();
            (r.part.name(), first, last, r.bytes)
        })
        .collect();
    let d = PyDict::new(py);
    d.set_item("reads", reads)?;
    d.set_item("nodes", &tally.nodes)?;
    d.set_item("canonical", &tally.canonical)?;
    Ok(d)
}

/// Mark the calling thread's later engine calls as background work, run on background
/// pool `pool` (below `BACKGROUND_POOLS`), whose threads have the lowest OS priority, and
/// lower the calling thread's own priority too, for good; None unmarks its engine calls. A
/// growing tree's merger threads, one pool each, so that merges neither slow the
/// foreground's appends and queries nor wait behind each other.
#[pyfunction]
#[pyo3(signature = (pool))]
fn mark_background_thread(pool: Option<usize>) -> PyResult<()> {
    background::set(pool).map_err(PyValueError::new_err)
}

/// Panic on purpose, on this thread or on a worker thread, so tests can check that a panic
/// becomes `InternalError`.
#[pyfunction]
fn _panic_for_tests(py: Python<'_>, on_worker: bool) -> PyResult<()> {
    py.detach(|| {
        guarded(|| -> Result<(), Error> {
            if on_worker {
                core::panic_on_worker_for_tests();
            }
            panic!("deliberate panic for tests");
        })
    })
}

/// `data` with every checksum recomputed, so that tests can hand the loader a crafted file
/// whose checksums hold.
#[pyfunction]
fn _rehash_for_tests<'py>(py: Python<'py>, data: &[u8]) -> Bound<'py, PyBytes> {
    let mut bytes = data.to_vec();
    file::rehash_for_fuzzing(&mut bytes);
    PyBytes::new(py, &bytes)
}

/// A key column's levels (int64) and its rows' codes (uint32).
type CodedKeys<'py> = (Bound<'py, PyArray1<i64>>, Bound<'py, PyArray1<u32>>);

/// `(levels, codes)` of an integer key column (int64: integers, booleans, datetime ticks):
/// its distinct values ascending, and each row's position among them as uint32.
#[pyfunction]
fn code_keys<'py>(py: Python<'py>, values: PyReadonlyArray1<'py, i64>) -> PyResult<CodedKeys<'py>> {
    let values = values
        .as_slice()
        .map_err(|_| PyValueError::new_err("key values must be C-contiguous"))?;
    let coded = py.detach(|| guarded(|| core::code_keys(values)))?;
    Ok((coded.levels.into_pyarray(py), coded.codes.into_pyarray(py)))
}

/// `(index_bytes, peak_build_bytes, y_statistics_bytes)` of a tree of `n` rows; `weights` is None, "float64",
/// "int64" or "int128".
#[pyfunction]
#[pyo3(signature = (n, layout, weights=None, keys=None))]
fn estimate_bytes(
    n: usize,
    layout: &str,
    weights: Option<&str>,
    keys: Option<usize>,
) -> PyResult<(usize, usize, usize)> {
    let layout = parse_layout(layout)?;
    let weights = match weights {
        None => None,
        Some("float64") => Some(core::WeightKind::F64),
        Some("int64") => Some(core::WeightKind::I64),
        Some("int128") => Some(core::WeightKind::I128),
        Some(other) => {
            return Err(PyValueError::new_err(format!(
                "weights must be None, 'float64', 'int64' or 'int128', got {other:?}"
            )))
        }
    };
    let e = core::estimate_keyed(n, layout, weights, keys);
    Ok((e.index_bytes, e.peak_build_bytes, e.y_statistics_bytes))
}

fn parse_verify(verify: &str) -> PyResult<Verify> {
    match verify {
        "checksums" => Ok(Verify::Checksums),
        "full" => Ok(Verify::Full),
        other => Err(PyValueError::new_err(format!(
            "verify must be 'checksums' or 'full', got {other:?}"
        ))),
    }
}

fn parse_layout(layout: &str) -> PyResult<Layout> {
    match layout {
        "fast" => Ok(Layout::Fast),
        "compact" => Ok(Layout::Compact),
        other => Err(PyValueError::new_err(format!(
            "layout must be 'fast' or 'compact', got {other:?}"
        ))),
    }
}

#[pymodule]
fn _boxwood(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<PyTree>()?;
    m.add_class::<PyCounted>()?;
    m.add("InternalError", m.py().get_type::<InternalError>())?;
    m.add("IndexFileError", m.py().get_type::<IndexFileError>())?;
    m.add(
        "NotAnIndexFileError",
        m.py().get_type::<NotAnIndexFileError>(),
    )?;
    m.add(
        "UnsupportedIndexFileError",
        m.py().get_type::<UnsupportedIndexFileError>(),
    )?;
    m.add(
        "TruncatedIndexFileError",
        m.py().get_type::<TruncatedIndexFileError>(),
    )?;
    m.add(
        "ChecksumMismatchError",
        m.py().get_type::<ChecksumMismatchError>(),
    )?;
    m.add(
        "CorruptIndexFileError",
        m.py().get_type::<CorruptIndexFileError>(),
    )?;
    m.add("FORMAT_VERSION", file::FORMAT_VERSION)?;
    m.add("MAX_ROWS", core::MAX_ROWS)?;
    m.add("MAX_KEYS", core::MAX_KEYS)?;
    m.add("BACKGROUND_POOLS", background::POOLS)?;
    m.add_function(wrap_pyfunction!(mark_background_thread, m)?)?;
    m.add_function(wrap_pyfunction!(_panic_for_tests, m)?)?;
    m.add_function(wrap_pyfunction!(_rehash_for_tests, m)?)?;
    m.add_function(wrap_pyfunction!(estimate_bytes, m)?)?;
    m.add_function(wrap_pyfunction!(code_keys, m)?)?;
    Ok(())
}
