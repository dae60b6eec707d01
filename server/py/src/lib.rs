//! `goalsmith._native`: the compiled part of the Python package.
//!
//! A bundle is read and verified by the bundle crate (`goalsmith_bundle::read_bundle`), its
//! revision re-checked into the core's cost model exactly as the server does for `POST …/cost`,
//! and candidates are scored by the same core functions the server calls, so the numbers are the
//! server's bit for bit. The Python layer (`python/goalsmith/`) checks shapes and dtypes, gives
//! the arrays, and wraps the results as numpy arrays; this module reads the arrays through the
//! buffer protocol without copying them (float32 points are widened to float64 as the server
//! widens NPY points) and releases the GIL while it computes.

use goalsmith_bundle::{ReadBundle, ScoreError};
use goalsmith_core::cost::{CostModel, CostResult, MapBatch, PreparedMaps};
use half::f16;
use half::slice::HalfBitsSliceExt;
use pyo3::buffer::PyBuffer;
use pyo3::exceptions::PyValueError;
use pyo3::prelude::*;
use pyo3::types::PyBytes;
use std::collections::HashMap;
use std::sync::{Arc, Mutex, OnceLock};

pyo3::create_exception!(
    goalsmith,
    BundleError,
    PyValueError,
    "A bundle that cannot be read or does not verify against its manifest; the message names \
     the file at fault."
);

/// Map sizes whose prepared cost maps a bundle keeps (a planner uses one or two).
const PREPARED_SIZES: usize = 8;
/// Most threads a call may ask for.
const MAX_THREADS: usize = 1024;

fn bundle_error(e: ScoreError) -> PyErr {
    BundleError::new_err(e.to_string())
}

fn value_error(e: impl std::fmt::Display) -> PyErr {
    PyValueError::new_err(e.to_string())
}

/// A verified bundle with its cost model.
#[pyclass(frozen, module = "goalsmith._native")]
struct NativeBundle {
    read: ReadBundle,
    model: Arc<CostModel>,
    prepared: Mutex<Vec<PreparedAt>>,
}

/// Prepared cost maps and their (width, height).
type PreparedAt = ((usize, usize), Arc<PreparedMaps>);

/// Runs `f` on a pool of `threads` threads (`None`: rayon's global pool, one per core; one: the
/// calling thread itself, see [`goalsmith_core::cost::on_this_thread`]). Pools
/// are made once per size and kept.
fn on_threads<R: Send>(threads: Option<usize>, f: impl FnOnce() -> R + Send) -> PyResult<R> {
    let Some(k) = threads else {
        return Ok(f());
    };
    if !(1..=MAX_THREADS).contains(&k) {
        return Err(value_error(format!(
            "threads must be a whole number from 1 to {MAX_THREADS}, got {k}"
        )));
    }
    if k == 1 {
        // On the calling thread itself (the GIL is released): no hand-off to a pool.
        return Ok(goalsmith_core::cost::on_this_thread(f));
    }
    static POOLS: OnceLock<Mutex<HashMap<usize, Arc<rayon::ThreadPool>>>> = OnceLock::new();
    let pool = {
        let mut pools = POOLS
            .get_or_init(Default::default)
            .lock()
            .map_err(|_| value_error("a thread pool lock was poisoned"))?;
        match pools.get(&k) {
            Some(p) => p.clone(),
            None => {
                let p = Arc::new(
                    rayon::ThreadPoolBuilder::new()
                        .num_threads(k)
                        .build()
                        .map_err(value_error)?,
                );
                pools.insert(k, p.clone());
                p
            }
        }
    };
    Ok(pool.install(f))
}

/// The raw bytes of a float64 vector (native byte order), for `numpy.frombuffer`.
fn f64_bytes<'py>(py: Python<'py>, v: &[f64]) -> Bound<'py, PyBytes> {
    // SAFETY: f64 has no padding and any byte pattern is a valid u8; the length is exact.
    let bytes = unsafe { std::slice::from_raw_parts(v.as_ptr().cast::<u8>(), size_of_val(v)) };
    PyBytes::new(py, bytes)
}

/// What a cost call returns to the Python layer: costs (N,), per_point (N, P) row-major,
/// best, and the gradient (N, T, P, 2) when asked, each as float64 bytes.
type Scored<'py> = (
    Bound<'py, PyBytes>,
    Bound<'py, PyBytes>,
    usize,
    Option<Bound<'py, PyBytes>>,
);

fn scored<'py>(py: Python<'py>, r: &CostResult, grad: Option<&[f64]>) -> Scored<'py> {
    let per: Vec<f64> = r.per_point.iter().flatten().copied().collect();
    (
        f64_bytes(py, &r.costs),
        f64_bytes(py, &per),
        r.best,
        grad.map(|g| f64_bytes(py, g)),
    )
}

/// A C-contiguous buffer's values as a slice, without copying.
fn contiguous<'a, T: pyo3::buffer::Element>(
    buf: &'a PyBuffer<T>,
    what: &str,
    expected: usize,
) -> PyResult<&'a [T]> {
    if !buf.is_c_contiguous() {
        return Err(value_error(format!(
            "{what} must be C-contiguous (numpy.ascontiguousarray makes a contiguous copy)"
        )));
    }
    if buf.item_count() != expected {
        return Err(value_error(format!(
            "{what} holds {} values, its shape needs {expected}",
            buf.item_count()
        )));
    }
    // SAFETY: the buffer is C-contiguous with `item_count` items of T (checked by PyBuffer::get
    // for item size, format and alignment), and stays exported, so alive, while `buf` lives.
    // Python code must not write to it while a call runs without the GIL (as for numpy's own
    // GIL-free operations).
    Ok(unsafe { std::slice::from_raw_parts(buf.buf_ptr().cast::<T>(), expected) })
}

fn count(dims: &[usize]) -> PyResult<usize> {
    dims.iter()
        .try_fold(1usize, |acc, &d| acc.checked_mul(d))
        .ok_or_else(|| value_error("the batch is larger than 2^64 values"))
}

impl NativeBundle {
    fn prepared(&self, width: usize, height: usize) -> PyResult<Arc<PreparedMaps>> {
        let lock = || {
            self.prepared
                .lock()
                .map_err(|_| value_error("the prepared-maps lock was poisoned"))
        };
        if let Some((_, p)) = lock()?.iter().find(|(k, _)| *k == (width, height)) {
            return Ok(p.clone());
        }
        let p = Arc::new(
            self.model
                .prepare_maps(width, height)
                .map_err(value_error)?,
        );
        let mut cache = lock()?;
        if cache.len() >= PREPARED_SIZES {
            cache.remove(0);
        }
        cache.push(((width, height), p.clone()));
        Ok(p)
    }
}

#[pymethods]
impl NativeBundle {
    /// Reads and verifies a bundle's bytes and builds its cost model.
    #[new]
    fn new(py: Python<'_>, data: &[u8]) -> PyResult<Self> {
        py.detach(|| {
            let read = goalsmith_bundle::read_bundle(data).map_err(bundle_error)?;
            let spec = read.spec().map_err(bundle_error)?;
            let model = goalsmith_bundle::model(&spec).map_err(bundle_error)?;
            Ok(NativeBundle {
                read,
                model: Arc::new(model),
                prepared: Mutex::new(Vec::new()),
            })
        })
    }

    /// goal.json as text (the revision document as the server serves it).
    #[getter]
    fn goal_json(&self) -> PyResult<String> {
        let bytes = self
            .read
            .files
            .get("goal.json")
            .ok_or_else(|| BundleError::new_err("the bundle has no goal.json"))?;
        String::from_utf8(bytes.clone())
            .map_err(|e| BundleError::new_err(format!("goal.json: {e}")))
    }

    /// manifest.json as text.
    #[getter]
    fn manifest_json(&self) -> String {
        self.read.manifest.to_string()
    }

    /// Names of the bundle's files (manifest.json aside), sorted.
    fn names(&self) -> Vec<String> {
        self.read.files.keys().cloned().collect()
    }

    /// One verified file's bytes.
    fn file<'py>(&self, py: Python<'py>, name: &str) -> PyResult<Bound<'py, PyBytes>> {
        let bytes = self
            .read
            .files
            .get(name)
            .ok_or_else(|| pyo3::exceptions::PyKeyError::new_err(name.to_string()))?;
        Ok(PyBytes::new(py, bytes))
    }

    /// Number of source points P.
    #[getter]
    fn points(&self) -> usize {
        self.model.len()
    }

    /// Frame (width, height).
    #[getter]
    fn frame_size(&self) -> (usize, usize) {
        self.model.frame_size()
    }

    /// Scores points (n, t, P, 2), float64 (`dtype` "f8") or float32 ("f4").
    #[pyo3(signature = (points, dtype, n, t, grad, threads))]
    #[allow(clippy::too_many_arguments)]
    fn cost_points<'py>(
        &self,
        py: Python<'py>,
        points: &Bound<'py, PyAny>,
        dtype: &str,
        n: usize,
        t: usize,
        grad: bool,
        threads: Option<usize>,
    ) -> PyResult<Scored<'py>> {
        let expected = count(&[n, t, self.model.len(), 2])?;
        let model = self.model.clone();
        let run = |flat: &[f64]| -> PyResult<(CostResult, Option<Vec<f64>>)> {
            py.detach(|| {
                on_threads(threads, || {
                    if grad {
                        model
                            .evaluate_points_grad(flat, n, t)
                            .map(|(r, g)| (r, Some(g)))
                    } else {
                        model.evaluate_points(flat, n, t).map(|r| (r, None))
                    }
                })?
                .map_err(value_error)
            })
        };
        let (result, g) = match dtype {
            "f8" => {
                let buf = PyBuffer::<f64>::get(points)?;
                run(contiguous(&buf, "points", expected)?)?
            }
            "f4" => {
                let buf = PyBuffer::<f32>::get(points)?;
                let narrow = contiguous(&buf, "points", expected)?;
                // Widened exactly, as the server widens float32 NPY points.
                let wide: Vec<f64> = py.detach(|| narrow.iter().map(|&x| f64::from(x)).collect());
                run(&wide)?
            }
            other => {
                return Err(value_error(format!(
                    "points must be float32 or float64, not {other}"
                )));
            }
        };
        Ok(scored(py, &result, g.as_deref()))
    }

    /// Scores probability maps (n, t, P, h, w), float32 (`dtype` "f4") or float16 ("f2", given
    /// as a uint16 view of the same memory).
    #[pyo3(signature = (maps, dtype, n, t, h, w, threads))]
    #[allow(clippy::too_many_arguments)]
    fn cost_maps<'py>(
        &self,
        py: Python<'py>,
        maps: &Bound<'py, PyAny>,
        dtype: &str,
        n: usize,
        t: usize,
        h: usize,
        w: usize,
        threads: Option<usize>,
    ) -> PyResult<Scored<'py>> {
        let expected = count(&[n, t, self.model.len(), h, w])?;
        let prepared = py.detach(|| self.prepared(w, h))?;
        let run = |batch: MapBatch<'_>| -> PyResult<CostResult> {
            py.detach(|| {
                on_threads(threads, || prepared.evaluate(batch, n, t))?.map_err(value_error)
            })
        };
        let result = match dtype {
            "f4" => {
                let buf = PyBuffer::<f32>::get(maps)?;
                run(MapBatch::F32(contiguous(&buf, "maps", expected)?))?
            }
            "f2" => {
                let buf = PyBuffer::<u16>::get(maps)?;
                let bits = contiguous(&buf, "maps", expected)?;
                let halves: &[f16] = bits.reinterpret_cast();
                run(MapBatch::F16(halves))?
            }
            other => {
                return Err(value_error(format!(
                    "probability maps must be float32 or float16, not {other}"
                )));
            }
        };
        Ok(scored(py, &result, None))
    }
}

/// The compiled module.
#[pymodule]
fn _native(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add_class::<NativeBundle>()?;
    m.add("BundleError", m.py().get_type::<BundleError>())?;
    m.add("FORMAT_VERSION", goalsmith_bundle::BUNDLE_FORMAT_VERSION)?;
    m.add("SAFETY_CAUTION", goalsmith_bundle::SAFETY_CAUTION)?;
    Ok(())
}
