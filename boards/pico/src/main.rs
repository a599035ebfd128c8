//! hone firmware for the Raspberry Pi Pico (RP2040, Cortex-M0+ at 125 MHz).
//!
//! It samples the analog input on GPIO26 (ADC channel 0) and sends the readings to the host, runs
//! the Phase-1 workload, then the calibration session with live readings: the soil probe's output
//! on GPIO26 gives the `raw_counts` input of each calibration sample, paired with the soil
//! temperature and the reference water content stored for that sample (a reference instrument's
//! readings; on a bench they would come from the technician). The hold-out samples stay those
//! stored in flash. Then the throughput phase (a larger model on values drawn on the chip, see
//! `hone_fw::throughput`) measures cycles per multiply-accumulate. The tick counter is SysTick on the core clock, so spans are reported in
//! cycles. Logs go out over RTT; the run ends with a semihosting exit, which a probe-based runner
//! turns into its exit code.
#![no_std]
#![no_main]

use defmt_rtt as _;
use hone_fw::cortex_m::SysTickPlatform;
use hone_fw::hone_core::num::Raw;
use hone_fw::hone_core::reading::ReadingScale;
use hone_fw::train::{SampleSet, Session};
use hone_fw::{exit_code, record, semihosting_exit, Ctx, Platform, SessionError, TickUnit};
use rp2040_hal::adc::{Adc, AdcChannel};
use rp2040_hal::clocks::{init_clocks_and_plls, Clock};
use rp2040_hal::{entry, gpio, pac, Sio, Watchdog};

/// Second-stage boot loader for the Pico's W25Q080 flash, placed at the start of flash.
// Placing a static in a named section under a fixed symbol counts as `unsafe_code`: the boot
// ROM looks for exactly this section, and nothing else defines the symbol.
#[allow(unsafe_code)]
#[link_section = ".boot2"]
#[used]
#[no_mangle]
pub static BOOT2_FIRMWARE: [u8; 256] = rp2040_boot2::BOOT_LOADER_W25Q080;

hone_fw::include_session!();

/// Frequency of the Pico's crystal.
const XOSC_HZ: u32 = 12_000_000;

/// ADC readings taken from GPIO26 per run.
const ADC_SAMPLES: usize = 64;

/// Logs what failed during set-up and exits.
fn fail(what: &str) -> ! {
    record::error(what);
    record::done(exit_code::SESSION_FAILED);
    semihosting_exit(exit_code::SESSION_FAILED)
}

#[entry]
fn main() -> ! {
    let Some(mut pac) = pac::Peripherals::take() else {
        fail("peripherals-taken")
    };
    let Some(core) = pac::CorePeripherals::take() else {
        fail("core-peripherals-taken")
    };
    let mut watchdog = Watchdog::new(pac.WATCHDOG);
    let Ok(clocks) = init_clocks_and_plls(
        XOSC_HZ,
        pac.XOSC,
        pac.CLOCKS,
        pac.PLL_SYS,
        pac.PLL_USB,
        &mut pac.RESETS,
        &mut watchdog,
    ) else {
        fail("clock-init")
    };
    let sio = Sio::new(pac.SIO);
    let pins = gpio::Pins::new(
        pac.IO_BANK0,
        pac.PADS_BANK0,
        sio.gpio_bank0,
        &mut pac.RESETS,
    );
    let mut adc = Adc::new(pac.ADC, &mut pac.RESETS);
    let Ok(mut gpio26) = rp2040_hal::adc::AdcPin::new(pins.gpio26.into_floating_input()) else {
        fail("adc-pin")
    };

    let hz = clocks.system_clock.freq().to_Hz();
    let platform = SysTickPlatform::new(core.SYST, "pico", TickUnit::CoreCycles { hz });
    hone_fw::run(platform, move |ctx| {
        sample(ctx, &mut adc, &mut gpio26)?;
        hone_fw::workload::phase1(ctx)?;
        calibrate(ctx, &mut adc, &mut gpio26)?;
        hone_fw::throughput::run::<
            _,
            { session::TPUT_ARENA_WORDS },
            { session::TPUT_FLOAT_ARENA_WORDS },
            { session::TPUT_VALUES },
        >(ctx, session::THROUGHPUT.as_ref())
    })
}

/// The calibration session with the probe's live readings as the `raw_counts` input (channel 0
/// of the soil model): one conversion per calibration sample, scaled and quantized as the host
/// scales its data.
fn calibrate<P: Platform>(
    ctx: &mut Ctx<'_, P>,
    adc: &mut Adc,
    channel: &mut impl AdcChannel,
) -> Result<(), SessionError> {
    let stored = &session::SESSION;
    let inputs = stored.desc.input.size() as usize;
    let scale = session::SCALING
        .first()
        .copied()
        .ok_or(SessionError::Check("no-input-scaling"))?;
    // The channel's scale in fixed point: integer arithmetic from here on (the M0+ has no FPU).
    let scale = ReadingScale::new(scale, stored.desc.input_format).map_err(SessionError::Engine)?;
    // The soil model's inputs are Q3.12 (`i16`); another model fails to compile here.
    let mut x: [i16; session::CALIB_X.len()] = session::CALIB_X;
    for row in x.chunks_mut(inputs) {
        let raw: u16 = adc
            .read(channel)
            .map_err(|_| SessionError::Check("adc-read"))?;
        if let Some(v) = row.first_mut() {
            // Saturated to the input format's word (i16) by `quantize`, so the cast is exact.
            *v = scale.quantize(i32::from(raw)).0 as i16;
        }
    }
    let live = Session {
        calibration: SampleSet {
            x: Raw::I16(&x),
            ..stored.calibration
        },
        ..*stored
    };
    hone_fw::train::run::<
        P,
        { session::ARENA_WORDS },
        { session::FLOAT_ARENA_WORDS },
        { session::CHECKPOINT_BYTES },
    >(ctx, &live)
}

/// Reads [`ADC_SAMPLES`] conversions from `channel`, measures them, logs a `sensor` summary and
/// sends the raw readings (little-endian `u16`) as the payload `adc_gpio26`.
fn sample<P: Platform>(
    ctx: &mut Ctx<'_, P>,
    adc: &mut Adc,
    channel: &mut impl AdcChannel,
) -> Result<(), SessionError> {
    let mut readings = [0u16; ADC_SAMPLES];
    let (result, _) = ctx.measure("adc_gpio26", ADC_SAMPLES as u32, || {
        for r in readings.iter_mut() {
            *r = adc.read(channel)?;
        }
        Ok::<(), rp2040_hal::adc::Error>(())
    });
    result.map_err(|_| SessionError::Check("adc-read"))?;

    let min = readings.iter().copied().min().unwrap_or(0);
    let max = readings.iter().copied().max().unwrap_or(0);
    let sum: u32 = readings.iter().map(|&r| u32::from(r)).sum();
    record::sensor(
        "adc_gpio26",
        ADC_SAMPLES as u32,
        u32::from(min),
        u32::from(max),
        sum / ADC_SAMPLES as u32,
    );

    let mut bytes = [0u8; ADC_SAMPLES * 2];
    for (pair, r) in bytes.chunks_exact_mut(2).zip(readings) {
        pair.copy_from_slice(&r.to_le_bytes());
    }
    ctx.send_blob("adc_gpio26", &bytes)
}
