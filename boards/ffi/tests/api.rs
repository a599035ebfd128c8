//! The C interface against the core called directly: the same model, samples and calls give
//! the same weights, checkpoints and reports, and every misuse returns its status code.
//!
//! The model and samples are synthetic (a 2-3-1 dense network with made-up values), a
//! mechanism test of the glue, not of training quality.

use core::ffi::c_void;
use std::ffi::CStr;

use hone_core::blob::{self, BlobKind, TensorBlob, TensorRole};
use hone_core::guard::{self, GuardConfig, Verdict};
use hone_core::layer::{loss::Target, Tensor};
use hone_core::model::{LayerDesc, LayerKind, Loss, ModelDesc, ParamFormats, Shape, TrainDesc};
use hone_core::num::{QFormat, QScalar, Raw, Word};
use hone_core::plan::Plan;
use hone_core::train::{LayerParams, Trainer};
use hone_ffi::*;

const Q: QFormat = QFormat::new_unchecked(Word::I16, 12);
const W1: [i16; 6] = [1200, -800, 300, 2500, -1500, 700];
const B1: [i16; 3] = [100, -50, 20];
const W2: [i16; 3] = [900, -1100, 1600];
const B2: [i16; 1] = [-30];

fn desc() -> ModelDesc {
    let p = ParamFormats::plain(Q, 20);
    let dense = |units| LayerDesc {
        kind: LayerKind::Dense { units },
        mode: hone_core::model::TrainMode::Full,
        weight: p,
        bias: p,
        out: Q,
        grad: Q,
    };
    let layers = [dense(3), LayerDesc::simple(LayerKind::Relu, Q, Q), dense(1)];
    let train = TrainDesc::sgd(QScalar { raw: 1, frac: 4 });
    ModelDesc::new(Shape::vector(2), Q, &layers, Loss::SquaredError, train).unwrap()
}

fn le(v: &[i16]) -> Vec<u8> {
    v.iter().flat_map(|x| x.to_le_bytes()).collect()
}

fn model_blob() -> Vec<u8> {
    let d = desc();
    let (w1, b1, w2, b2) = (le(&W1), le(&B1), le(&W2), le(&B2));
    let t = |layer, role, elems, data: &'static [u8]| TensorBlob {
        layer,
        role,
        format: Q,
        elems,
        data,
    };
    let leak = |v: Vec<u8>| -> &'static [u8] { Box::leak(v.into_boxed_slice()) };
    let tensors = [
        t(0, TensorRole::Weight, 6, leak(w1)),
        t(0, TensorRole::Bias, 3, leak(b1)),
        t(2, TensorRole::Weight, 3, leak(w2)),
        t(2, TensorRole::Bias, 1, leak(b2)),
    ];
    let mut buf = vec![0u8; 1024];
    let n = blob::encode_parts(
        BlobKind::Model,
        &d,
        &[],
        None,
        4,
        tensors.into_iter(),
        &mut buf,
    )
    .unwrap();
    buf.truncate(n);
    buf
}

const XS: [[i16; 2]; 4] = [[4096, 0], [0, 4096], [2048, -2048], [-1024, 3072]];
const YS: [[i16; 1]; 4] = [[2048], [-1024], [3000], [500]];

fn target(y: &[i16; 1]) -> HoneTarget {
    HoneTarget {
        values: y.as_ptr().cast(),
        count: 1,
        word_bits: 16,
        frac: 12,
        label: 0,
    }
}

/// A session in a fresh, 8-byte aligned block.
struct Block {
    mem: Vec<u64>,
    session: *mut HoneSession,
}

fn open(blob: &[u8]) -> Block {
    let mut size = 0usize;
    // SAFETY (test): valid pointers and lengths.
    assert_eq!(
        unsafe { hone_memory_size(blob.as_ptr(), blob.len(), &mut size) },
        HONE_OK
    );
    let mut mem = vec![0u64; size.div_ceil(8)];
    let mut session = core::ptr::null_mut();
    let r = unsafe {
        hone_init(
            mem.as_mut_ptr().cast(),
            size,
            blob.as_ptr(),
            blob.len(),
            &mut session,
        )
    };
    assert_eq!(r, HONE_OK, "{:?}", unsafe {
        CStr::from_ptr(hone_error_str(r))
    });
    Block { mem, session }
}

fn weights(s: *mut HoneSession) -> Vec<u8> {
    let mut n = 0usize;
    assert_eq!(
        unsafe { hone_weights(s, core::ptr::null_mut(), 0, &mut n) },
        HONE_OK
    );
    let mut out = vec![0u8; n];
    assert_eq!(
        unsafe { hone_weights(s, out.as_mut_ptr(), n, &mut n) },
        HONE_OK
    );
    out
}

/// The core's own trainer on the same model, and its weights in the same layout.
fn with_core<R>(f: impl FnOnce(&mut Trainer<'_>) -> R) -> (R, Vec<u8>) {
    let d = desc();
    let plan = Plan::of(&d).unwrap();
    let mut arena = vec![0u32; plan.ram_words()];
    let init = [
        LayerParams {
            weight: Raw::I16(&W1),
            bias: Raw::I16(&B1),
        },
        LayerParams::NONE,
        LayerParams {
            weight: Raw::I16(&W2),
            bias: Raw::I16(&B2),
        },
    ];
    let mut t = Trainer::new(&d, &plan, &mut arena, &init).unwrap();
    let r = f(&mut t);
    let mut w = Vec::new();
    for k in [0, 2] {
        let p = t.params(k).unwrap();
        for raw in [p.weight, p.bias] {
            for i in 0..raw.len() {
                w.extend_from_slice(&(raw.at(i) as i16).to_le_bytes());
            }
        }
    }
    (r, w)
}

fn sample(i: usize) -> (Tensor<'static>, Target<'static>) {
    (
        Tensor {
            raw: Raw::I16(&XS[i]),
            fmt: Q,
        },
        Target::Values(Tensor {
            raw: Raw::I16(&YS[i]),
            fmt: Q,
        }),
    )
}

#[test]
fn steps_match_the_core() {
    let blob = model_blob();
    let b = open(&blob);
    let mut losses = Vec::new();
    for _ in 0..3 {
        for (x, y) in XS.iter().zip(YS.iter()) {
            let mut o = HoneOutcome::default();
            let r = unsafe { hone_step(b.session, x.as_ptr().cast(), &target(y), &mut o) };
            assert_eq!(r, HONE_OK);
            losses.push(o.loss);
        }
    }
    let (core_losses, core_weights) = with_core(|t| {
        let mut l = Vec::new();
        for _ in 0..3 {
            for i in 0..4 {
                let (x, y) = sample(i);
                l.push(t.step(x, y).unwrap().loss.0);
            }
        }
        l
    });
    assert_eq!(losses, core_losses);
    assert_eq!(weights(b.session), core_weights);
    // Training moved the weights away from the factory ones.
    assert_ne!(core_weights, [le(&W1), le(&B1), le(&W2), le(&B2)].concat());
    drop(b.mem);
}

#[test]
fn calibrate_matches_guard_calibrate() {
    let blob = model_blob();
    let b = open(&blob);
    let train: Vec<HoneSample> = (0..3)
        .map(|i| HoneSample {
            x: XS[i].as_ptr().cast(),
            y: target(&YS[i]),
        })
        .collect();
    let holdout = [HoneSample {
        x: XS[3].as_ptr().cast(),
        y: target(&YS[3]),
    }];
    let mut report = HoneReport::default();
    let r = unsafe {
        hone_calibrate(
            b.session,
            train.as_ptr(),
            train.len(),
            2,
            holdout.as_ptr(),
            1,
            core::ptr::null(),
            core::ptr::null(),
            0,
            &mut report,
        )
    };
    assert_eq!(r, HONE_OK);
    let last_good = blob::decode(&blob).unwrap();
    let (core_report, core_weights) = with_core(|t| {
        let train = (0..2).flat_map(|_| (0..3).map(sample));
        guard::calibrate(t, train, [sample(3)], &GuardConfig::DEFAULT, &last_good).unwrap()
    });
    assert_eq!(report.before_loss, core_report.before.mean_loss.0);
    assert_eq!(report.after_loss, core_report.after.mean_loss.0);
    assert_eq!(report.trained, core_report.trained);
    assert_eq!(report.accepted == 1, core_report.verdict == Verdict::Accept);
    assert_eq!(weights(b.session), core_weights);
}

/// A NOR flash in RAM for the callbacks: 8 sectors of 1 KiB.
struct RamFlash(Vec<u8>);

unsafe extern "C" fn read(ctx: *mut c_void, off: u32, buf: *mut u8, len: u32) -> i32 {
    let f = unsafe { &*(ctx as *const RamFlash) };
    let src = &f.0[off as usize..(off + len) as usize];
    unsafe { core::ptr::copy_nonoverlapping(src.as_ptr(), buf, len as usize) };
    0
}

unsafe extern "C" fn write(ctx: *mut c_void, off: u32, data: *const u8, len: u32) -> i32 {
    let f = unsafe { &mut *(ctx as *mut RamFlash) };
    let src = unsafe { core::slice::from_raw_parts(data, len as usize) };
    for (d, s) in f.0[off as usize..].iter_mut().zip(src) {
        *d &= *s; // NOR: writes only clear bits.
    }
    0
}

unsafe extern "C" fn erase(ctx: *mut c_void, from: u32, to: u32) -> i32 {
    let f = unsafe { &mut *(ctx as *mut RamFlash) };
    f.0[from as usize..to as usize].fill(0xFF);
    0
}

#[test]
fn checkpoint_round_trip_through_flash_callbacks() {
    let blob = model_blob();
    let b = open(&blob);
    let mut ram = RamFlash(vec![0xFF; 8 * 1024]);
    let flash = HoneFlash {
        ctx: (&mut ram as *mut RamFlash).cast(),
        capacity: 8 * 1024,
        erase_size: 1024,
        read: Some(read),
        write: Some(write),
        erase: Some(erase),
    };
    let mut size = 0usize;
    assert_eq!(
        unsafe { hone_checkpoint_size(b.session, &mut size) },
        HONE_OK
    );
    let mut scratch = vec![0u8; size];
    // Nothing stored yet.
    let r = unsafe { hone_checkpoint_load(b.session, &flash, 0, 8192, scratch.as_mut_ptr(), size) };
    assert_eq!(r, HONE_ERR_NO_CHECKPOINT);
    for (x, y) in XS.iter().zip(YS.iter()) {
        unsafe {
            hone_step(
                b.session,
                x.as_ptr().cast(),
                &target(y),
                core::ptr::null_mut(),
            )
        };
    }
    let saved = weights(b.session);
    let mut seq = 0u32;
    let r = unsafe {
        hone_checkpoint_save(
            b.session,
            &flash,
            0,
            8192,
            scratch.as_mut_ptr(),
            size,
            &mut seq,
        )
    };
    assert_eq!((r, seq), (HONE_OK, 1));
    // Train on, then load: the saved weights come back.
    for (x, y) in XS.iter().zip(YS.iter()) {
        unsafe {
            hone_step(
                b.session,
                x.as_ptr().cast(),
                &target(y),
                core::ptr::null_mut(),
            )
        };
    }
    assert_ne!(weights(b.session), saved);
    let r = unsafe { hone_checkpoint_load(b.session, &flash, 0, 8192, scratch.as_mut_ptr(), size) };
    assert_eq!(r, HONE_OK);
    assert_eq!(weights(b.session), saved);
    // A scratch buffer too small for the checkpoint.
    let r = unsafe {
        hone_checkpoint_save(
            b.session,
            &flash,
            0,
            8192,
            scratch.as_mut_ptr(),
            size - 1,
            &mut seq,
        )
    };
    assert_eq!(r, HONE_ERR_BUFFER);
    // An erase size the library does not support.
    let odd = HoneFlash {
        erase_size: 512,
        ..flash
    };
    let r = unsafe {
        hone_checkpoint_save(
            b.session,
            &odd,
            0,
            8192,
            scratch.as_mut_ptr(),
            size,
            &mut seq,
        )
    };
    assert_eq!(r, HONE_ERR_STORE);
}

#[test]
fn misuse_returns_its_status() {
    let blob = model_blob();
    let mut size = 0usize;
    unsafe { hone_memory_size(blob.as_ptr(), blob.len(), &mut size) };
    let mut mem = vec![0u64; size.div_ceil(8) + 1];
    let mut s = core::ptr::null_mut();
    let base: *mut c_void = mem.as_mut_ptr().cast();
    unsafe {
        assert_eq!(
            hone_init(base, size - 1, blob.as_ptr(), blob.len(), &mut s),
            HONE_ERR_MEMORY
        );
        let odd = base.cast::<u8>().add(4).cast();
        assert_eq!(
            hone_init(odd, size, blob.as_ptr(), blob.len(), &mut s),
            HONE_ERR_ALIGN
        );
        let mut bad = blob.clone();
        bad[10] ^= 1;
        assert_eq!(
            hone_init(base, size, bad.as_ptr(), bad.len(), &mut s),
            HONE_ERR_BLOB
        );
        assert_eq!(
            hone_init(base, size, core::ptr::null(), 0, &mut s),
            HONE_ERR_NULL
        );
        // Not initialised: the magic is missing.
        let fake = base.cast::<HoneSession>();
        assert_eq!(hone_flush(fake, core::ptr::null_mut()), HONE_ERR_SESSION);
        assert_eq!(
            hone_init(base, size, blob.as_ptr(), blob.len(), &mut s),
            HONE_OK
        );
        // A target of two values for a model of one output.
        let y2 = [1i16, 2];
        let t = HoneTarget {
            values: y2.as_ptr().cast(),
            count: 2,
            word_bits: 16,
            frac: 12,
            label: 0,
        };
        assert_eq!(
            hone_step(s, XS[0].as_ptr().cast(), &t, core::ptr::null_mut()),
            HONE_ERR_SAMPLE
        );
        // A misaligned input.
        let x = [0i16; 3];
        let xp = x.as_ptr().cast::<u8>().add(1).cast();
        assert_eq!(
            hone_step(s, xp, &target(&YS[0]), core::ptr::null_mut()),
            HONE_ERR_ALIGN
        );
        // A partial batch is pending? Batch size 1 here, so a checkpoint is always possible.
        let mut n = 0usize;
        assert_eq!(hone_checkpoint_size(s, &mut n), HONE_OK);
    }
    // Every code has its own text; unknown codes say so.
    let codes = [
        HONE_OK,
        HONE_ERR_NULL,
        HONE_ERR_ALIGN,
        HONE_ERR_MEMORY,
        HONE_ERR_BLOB,
        HONE_ERR_MODEL,
        HONE_ERR_SAMPLE,
        HONE_ERR_SESSION,
        HONE_ERR_PENDING,
        HONE_ERR_BUFFER,
        HONE_ERR_FLASH,
        HONE_ERR_NO_CHECKPOINT,
        HONE_ERR_STORE,
        HONE_ERR_OTHER_MODEL,
        HONE_ERR_INTERNAL,
    ];
    let texts: std::collections::BTreeSet<String> = codes
        .iter()
        .map(|&c| {
            unsafe { CStr::from_ptr(hone_error_str(c)) }
                .to_string_lossy()
                .into_owned()
        })
        .collect();
    assert_eq!(texts.len(), codes.len());
    let unknown = unsafe { CStr::from_ptr(hone_error_str(7)) };
    assert_eq!(unknown.to_str().unwrap(), "unknown status code");
}
