//! Bounded reads: files larger than their format allows, endless streams, fresh regions.

use super::*;

#[test]
fn files_larger_than_their_format_allows_are_refused_before_reading() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    let flash = hone_host::limits::FLASH_BYTES;
    sparse(&dir.join("big.honb"), flash + 1);
    sparse(&dir.join("big.img"), 2 * flash);
    sparse(&dir.join("big.toml"), hone_host::limits::CONFIG_BYTES + 1);
    sparse(&dir.join("big.json"), hone_host::limits::MODEL_BYTES + 1);
    sparse(&dir.join("big.csv"), hone_host::limits::CSV_BYTES + 1);
    let said = refused(dir, &["inspect", "big.honb"], &["big.honb", "larger than"]);
    assert!(said.contains(&flash.to_string()), "{said}");
    refused(
        dir,
        &["checkpoint", "read", "big.img", "--out", "x.honb"],
        &["big.img", "larger than"],
    );
    refused(
        dir,
        &["checkpoint", "write", "big.honb", "--out", "x.img"],
        &["big.honb", "larger than"],
    );
    let soil = example("soil-moisture.toml");
    refused(
        dir,
        &[
            "train", "--config", "big.toml", "--data", "big.csv", "--out", "m.json",
        ],
        &["big.toml", "larger than"],
    );
    refused(
        dir,
        &[
            "train", "--config", &soil, "--data", "big.csv", "--out", "m.json",
        ],
        &["big.csv", "larger than"],
    );
    refused(
        dir,
        &[
            "quantize",
            "--config",
            &soil,
            "--model",
            "big.json",
            "--data",
            &demo_data("soil_unit_calibration.csv"),
            "--blob",
            "m.honb",
        ],
        &["big.json", "larger than"],
    );
}

/// A file without an end (a device that never stops giving bytes) is cut at the limit.
#[cfg(unix)]
#[test]
fn an_endless_stream_is_cut_at_the_limit() {
    let tmp = tempfile::tempdir().unwrap();
    refused(
        tmp.path(),
        &["inspect", "/dev/zero"],
        &["/dev/zero", "larger than"],
    );
}

#[test]
fn a_fresh_region_is_bounded_by_the_largest_flash() {
    let tmp = tempfile::tempdir().unwrap();
    let dir = tmp.path();
    soil_model(dir);
    refused(
        dir,
        &[
            "checkpoint",
            "write",
            "soil.honb",
            "--region",
            "32M",
            "--out",
            "a.img",
        ],
        &["--region", "largest flash"],
    );
    // The largest flash itself is accepted.
    run_ok(
        dir,
        &[
            "checkpoint",
            "write",
            "soil.honb",
            "--region",
            "16M",
            "--out",
            "a.img",
        ],
    );
    assert_eq!(fs::metadata(dir.join("a.img")).unwrap().len(), 16 << 20);
}
