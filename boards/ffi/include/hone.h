/* The C interface of hone's core: generated from boards/ffi/src/lib.rs by cbindgen (`cargo xtask ffi-header`). Do not edit. */

#ifndef HONE_H
#define HONE_H

#include <stddef.h>
#include <stdint.h>

// Success.
#define HONE_OK 0

// A pointer the call needs is NULL.
#define HONE_ERR_NULL -1

// The memory block, a sample or a target is not aligned as required.
#define HONE_ERR_ALIGN -2

// The memory block is smaller than [`hone_memory_size`] says.
#define HONE_ERR_MEMORY -3

// The blob is malformed or corrupted (bad magic, version, CRC or contents).
#define HONE_ERR_BLOB -4

// The model description is invalid, or uses a layer kind, loss, value word or training part
// this library was built without.
#define HONE_ERR_MODEL -5

// A sample does not fit the model: wrong input or target length, a class label out of
// range, or a target of the wrong kind for the loss.
#define HONE_ERR_SAMPLE -6

// The handle is not a session made by [`hone_init`].
#define HONE_ERR_SESSION -7

// Samples of a partial batch are pending; call [`hone_flush`] before a checkpoint.
#define HONE_ERR_PENDING -8

// An output or scratch buffer is too small.
#define HONE_ERR_BUFFER -9

// A flash callback reported an error (or is missing).
#define HONE_ERR_FLASH -10

// The flash region holds no valid checkpoint.
#define HONE_ERR_NO_CHECKPOINT -11

// The flash region or geometry is unusable (misaligned, too small, out of bounds, an
// unsupported erase size), the checkpoint does not fit a slot, or it did not read back.
#define HONE_ERR_STORE -12

// The blob describes another model than the session's.
#define HONE_ERR_OTHER_MODEL -13

// Any other error of the core.
#define HONE_ERR_INTERNAL -14

// Alignment, in bytes, the memory block of [`hone_init`] needs.
#define HONE_MEMORY_ALIGN 8

// Write unit of the flash behind [`HoneFlash`], in bytes: every write callback gets an
// offset and a length that are multiples of it.
#define HONE_FLASH_WRITE_SIZE 4

// A session: the decoded factory blob, the memory plan, the parameters and the trainer,
// inside the caller's memory block. Opaque to C.
typedef struct HoneSession HoneSession;

// A regression target (`values` not NULL) or a class label (`values` NULL).
typedef struct {
  // `count` values of `word_bits` bits (8, 16 or 32), aligned to their size, or NULL for
  // a class target.
  const void *values;
  // Number of values.
  uint32_t count;
  // Bits of one value: 8, 16 or 32.
  uint8_t word_bits;
  // Fraction bits of the values (0 to 31).
  uint8_t frac;
  // The class label, when `values` is NULL.
  uint16_t label;
} HoneTarget;

// What one training step or evaluation gave.
typedef struct {
  // The sample's loss, in units of 2^-24.
  int64_t loss;
  // Activations that saturated in the sample's forward pass.
  uint32_t saturations;
  // The predicted class, or -1 for a regression model.
  int32_t predicted;
  // 1 if this step completed a batch and the weights changed, else 0.
  uint8_t updated;
} HoneOutcome;

// The guard's thresholds (see `hone_core::guard::GuardConfig`).
typedef struct {
  // Largest tolerated rise of the mean held-back loss, in parts per thousand.
  uint32_t max_loss_rise_permille;
  // Largest tolerated saturation rate of activations on the held-back samples, in parts per
  // million.
  uint32_t max_saturation_ppm;
  // Rises below this absolute loss (units of 2^-24) are tolerated whatever the ratio.
  int64_t loss_floor;
} HoneGuardConfig;

// One sample: an input in the model's input format, and its target.
typedef struct {
  // The input: as many values as the model takes, in its input word (see
  // [`hone_input_info`]), aligned to their size.
  const void *x;
  // The target.
  HoneTarget y;
} HoneSample;

// What one guarded calibration did.
typedef struct {
  // Mean held-back loss before training, in units of 2^-24.
  int64_t before_loss;
  // Mean held-back loss after training, in units of 2^-24.
  int64_t after_loss;
  // Saturated activations on the held-back samples before training.
  uint32_t before_saturations;
  // Saturated activations on the held-back samples after training.
  uint32_t after_saturations;
  // Samples trained on.
  uint32_t trained;
  // 1 if the new weights were kept; 0 if the trainer was rolled back.
  uint8_t accepted;
  // Why it was rolled back: 0 not rolled back, 1 the loss rose, 2 saturations spiked.
  uint8_t rejection;
} HoneReport;

// The caller's flash, through callbacks. Offsets are from the start of the flash device the
// callbacks address.
typedef struct {
  // Passed to every callback unchanged.
  void *ctx;
  // Size of the flash device in bytes.
  uint32_t capacity;
  // Erase sector size in bytes: 1024, 2048 or 4096.
  uint32_t erase_size;
  // Reads `len` bytes at `offset` into `buf`; returns 0 on success.
  int32_t (*read)(void *ctx, uint32_t offset, uint8_t *buf, uint32_t len);
  // Writes `len` bytes from `data` at `offset` (both multiples of [`HONE_FLASH_WRITE_SIZE`],
  // into erased flash); returns 0 on success.
  int32_t (*write)(void *ctx, uint32_t offset, const uint8_t *data, uint32_t len);
  // Erases `[from, to)` (both multiples of the erase size) to `0xFF`; returns 0 on success.
  int32_t (*erase)(void *ctx, uint32_t from, uint32_t to);
} HoneFlash;

#ifdef __cplusplus
extern "C" {
#endif // __cplusplus

// Writes the bytes a memory block for `blob` needs into `*out_bytes`.
//
// # Safety
// `blob` must be readable for `blob_len` bytes and `out_bytes` writable.
int32_t hone_memory_size(const uint8_t *blob, size_t blob_len, size_t *out_bytes);

// Starts a session for the model `blob` (a factory model, or a checkpoint to resume from)
// in the memory block `mem` of `mem_len` bytes, aligned to [`HONE_MEMORY_ALIGN`], and
// writes its handle into `*out`.
//
// # Safety
// `blob` must be readable for `blob_len` bytes and `mem` writable for `mem_len` bytes; both
// must stay in place and unchanged (except through this library) while the session is used.
// `out` must be writable.
int32_t hone_init(void *mem,
                  size_t mem_len,
                  const uint8_t *blob,
                  size_t blob_len,
                  HoneSession **out);

// Writes the model's input size (values per sample), its input word in bits and its input
// fraction bits.
//
// # Safety
// `s` is a handle from [`hone_init`]; the out pointers are writable or NULL.
int32_t hone_input_info(HoneSession *s, uint32_t *count, uint8_t *word_bits, uint8_t *frac);

// One training step on the sample `x`, `y`; the outcome goes to `*out` unless it is NULL.
//
// # Safety
// `s` is a handle from [`hone_init`]; `x` and `y` are a valid input and target (see
// [`HoneSample`]); `out` is writable or NULL.
int32_t hone_step(HoneSession *s, const void *x, const HoneTarget *y, HoneOutcome *out);

// Evaluates the sample `x`, `y` under the current weights, without training.
//
// # Safety
// As [`hone_step`].
int32_t hone_evaluate(HoneSession *s, const void *x, const HoneTarget *y, HoneOutcome *out);

// Applies the samples of a partial batch now. `*updated` (unless NULL) says whether the
// weights changed.
//
// # Safety
// `s` is a handle from [`hone_init`]; `updated` is writable or NULL.
int32_t hone_flush(HoneSession *s, uint8_t *updated);

// Writes the core's default guard thresholds into `*cfg`.
//
// # Safety
// `cfg` is writable.
int32_t hone_guard_default(HoneGuardConfig *cfg);

// One guarded calibration (the core's `guard::calibrate`): evaluates `holdout`, trains on
// `train` `passes` times in order, flushes, evaluates `holdout` again and judges with `cfg`
// (NULL: [`hone_guard_default`]). On rejection the trainer goes back to `last_good`
// (`last_good_len` bytes; NULL: the blob the session started from). The report goes to
// `*report` unless it is NULL.
//
// # Safety
// `s` is a handle from [`hone_init`]; `train` and `holdout` are readable for `n_train` and
// `n_holdout` valid samples; `cfg` is readable or NULL; `last_good` readable for
// `last_good_len` bytes or NULL; `report` writable or NULL.
int32_t hone_calibrate(HoneSession *s,
                       const HoneSample *train,
                       size_t n_train,
                       uint16_t passes,
                       const HoneSample *holdout,
                       size_t n_holdout,
                       const HoneGuardConfig *cfg,
                       const uint8_t *last_good,
                       size_t last_good_len,
                       HoneReport *report);

// Copies the trained tensors (layer by layer, weights then bias, every value little-endian
// in its storage word) into `out`, `out_len` bytes long, and writes their length into
// `*written`. With `out` NULL only the length is written.
//
// # Safety
// `s` is a handle from [`hone_init`]; `out` is writable for `out_len` bytes or NULL;
// `written` is writable.
int32_t hone_weights(HoneSession *s, uint8_t *out, size_t out_len, size_t *written);

// Writes the length of the session's checkpoint blob into `*bytes`: the scratch buffer
// [`hone_checkpoint_save`] and [`hone_checkpoint_load`] need.
//
// # Safety
// `s` is a handle from [`hone_init`]; `bytes` is writable.
int32_t hone_checkpoint_size(HoneSession *s, size_t *bytes);

// Writes the session's checkpoint into `scratch` (`scratch_len` bytes, at least
// [`hone_checkpoint_size`]) and commits it to the power-fail-safe A/B store in `region_len`
// bytes of `flash` from `region_offset` (both multiples of the erase size). The committed
// sequence number goes to `*seq` unless it is NULL.
//
// # Safety
// `s` is a handle from [`hone_init`]; `flash` is readable and its callbacks honour their
// documented contracts; `scratch` is writable for `scratch_len` bytes; `seq` is writable or
// NULL.
int32_t hone_checkpoint_save(HoneSession *s,
                             const HoneFlash *flash,
                             uint32_t region_offset,
                             uint32_t region_len,
                             uint8_t *scratch,
                             size_t scratch_len,
                             uint32_t *seq);

// Loads the newest valid checkpoint of the store in `flash` (as [`hone_checkpoint_save`]
// wrote it) through `scratch` and restores the trainer from it.
//
// # Safety
// As [`hone_checkpoint_save`].
int32_t hone_checkpoint_load(HoneSession *s,
                             const HoneFlash *flash,
                             uint32_t region_offset,
                             uint32_t region_len,
                             uint8_t *scratch,
                             size_t scratch_len);

// A short English text for a status code, NUL-terminated, in static memory.
const char *hone_error_str(int32_t code);

#ifdef __cplusplus
}  // extern "C"
#endif  // __cplusplus

#endif  /* HONE_H */
