use hone_core::store::sim::SimFlash;

use super::*;
use crate::inspect::{inspect, tests::sample_blob};

const NRF: Geometry = Geometry {
    erase: 1024,
    write: 4,
    read: 1,
};

#[test]
fn image_flash_follows_nor_rules() {
    let mut f = ImageFlash::<16, 4>::erased(4);
    assert_eq!(f.capacity(), 64);
    f.write(16, &[0x0F, 0xF0, 0x00, 0xAA]).unwrap();
    f.write(16, &[0xFF, 0x0F, 0xFF, 0x55]).unwrap();
    assert_eq!(&f.bytes()[16..20], &[0x0F, 0x00, 0x00, 0x00]);
    assert_eq!(f.violations(), 1);
    f.erase(16, 32).unwrap();
    assert!(f.bytes()[16..32].iter().all(|&b| b == 0xFF));
    assert_eq!(f.write(2, &[0; 4]), Err(SimError::NotAligned));
    assert_eq!(f.write(60, &[0; 8]), Err(SimError::OutOfBounds));
    assert_eq!(f.erase(8, 24), Err(SimError::NotAligned));
    assert_eq!(f.erase(32, 16), Err(SimError::OutOfBounds));
    let mut g = ImageFlash::<16, 4, 4>::erased(1);
    assert_eq!(g.read(1, &mut [0u8; 4]), Err(SimError::NotAligned));
    assert!(ImageFlash::<16, 4>::from_image(vec![0; 20]).is_err());
}

#[test]
fn round_trip_image_blob_inspect() {
    let blob = sample_blob(BlobKind::Checkpoint, 3);
    let image = write_image(&blob, NRF, 8192).unwrap();
    assert_eq!(image.len(), 8192);
    let (cp, got) = read_latest(&image, NRF).unwrap();
    assert_eq!(got, blob);
    assert_eq!((cp.seq, cp.slot, cp.blob_kind), (1, "A", "checkpoint"));
    assert_eq!((cp.other_slot.slot, cp.other_slot.state), ("B", "blank"));
    assert_eq!(cp.len as usize, blob.len());
    assert_eq!(cp.slot_len, 4096);
    assert_eq!(
        &image[cp.payload_offset as usize..][..blob.len()],
        &blob[..]
    );
    let report = inspect("pulled.bin", &got).unwrap();
    assert_eq!(report.kind, "checkpoint");
    assert_eq!(report.state.as_ref().map(|s| s.steps), Some(3));
}

#[test]
fn corrupt_newest_slot_gives_the_older_one() {
    let old = sample_blob(BlobKind::Checkpoint, 10);
    let new = sample_blob(BlobKind::Checkpoint, 20);
    let image = write_image(&old, NRF, 8192).unwrap();
    let (cp, mut image) = append(&image, NRF, &new).unwrap();
    assert_eq!((cp.seq, cp.slot), (2, "B"));
    let (latest, got) = read_latest(&image, NRF).unwrap();
    assert_eq!((latest.seq, &got), (2, &new));
    assert_eq!(
        (latest.other_slot.state, latest.other_slot.seq),
        ("older", Some(1))
    );
    // One byte in the middle of the newest payload.
    image[cp.payload_offset as usize + new.len() / 2] ^= 0x40;
    let (older, got) = read_latest(&image, NRF).unwrap();
    assert_eq!((older.seq, older.slot), (1, "A"));
    assert_eq!(got, old);
    assert_eq!(
        (older.other_slot.slot, older.other_slot.state),
        ("B", "invalid")
    );
    // A third commit goes to the slot of the damaged one, with the next sequence.
    let (third, image) = append(&image, NRF, &new).unwrap();
    assert_eq!((third.seq, third.slot), (2, "B"));
    assert_eq!(
        (third.other_slot.state, third.other_slot.seq),
        ("older", Some(1))
    );
    assert_eq!(read_latest(&image, NRF).unwrap().1, new);
}

#[test]
fn blank_image_has_no_checkpoint() {
    let e = read_latest(&[0xFF; 8192], NRF)
        .map(|_| ())
        .expect_err("blank image");
    assert!(matches!(e, ImageError::NoCheckpoint), "{e:?}");
    assert!(e.to_string().contains("no valid checkpoint"), "{e}");
    let e = read_latest(&[0x00; 8192], NRF)
        .map(|_| ())
        .expect_err("zeroed image");
    assert!(matches!(e, ImageError::NoCheckpoint), "{e:?}");
}

#[test]
fn same_bytes_as_the_device_simulator() {
    let blob = sample_blob(BlobKind::Checkpoint, 5);
    // nRF51-like pages.
    let mut sim = SimFlash::<8192, 1024, 4>::new();
    Store::open(&mut sim, 0, 8192)
        .unwrap()
        .commit(&blob)
        .unwrap();
    assert_eq!(write_image(&blob, NRF, 8192).unwrap(), sim.bytes().to_vec());
    // Write and read units whose least common multiple is 32 (header padded to 32 B),
    // and 8 (padded to 24 B).
    for (w, r) in [(32usize, 8usize), (8, 1)] {
        let mut sim32 = SimFlash::<8192, 256, 32, 8>::new();
        let mut sim8 = SimFlash::<8192, 256, 8, 1>::new();
        let expected = if w == 32 {
            Store::open(&mut sim32, 0, 8192)
                .unwrap()
                .commit(&blob)
                .unwrap();
            sim32.bytes().to_vec()
        } else {
            Store::open(&mut sim8, 0, 8192)
                .unwrap()
                .commit(&blob)
                .unwrap();
            sim8.bytes().to_vec()
        };
        let g = Geometry {
            erase: 256,
            write: w as u32,
            read: r as u32,
        };
        assert_eq!(write_image(&blob, g, 8192).unwrap(), expected, "{g:?}");
        assert_eq!(read_latest(&expected, g).unwrap().1, blob);
    }
}

#[test]
fn invalid_blob_in_a_valid_slot_is_named() {
    let mut f = ImageFlash::<1024, 4>::erased(8);
    {
        let mut st = Store::open(&mut f, 0, 8192).unwrap();
        st.commit(b"not a blob at all").unwrap();
    }
    let e = read_latest(f.bytes(), NRF)
        .map(|_| ())
        .expect_err("invalid blob");
    let text = e.to_string();
    assert!(matches!(e, ImageError::BlobInvalid { seq: 1, .. }), "{e:?}");
    assert!(
        text.contains("slot A") && text.contains("not a hone blob"),
        "{text}"
    );
}

#[test]
fn geometry_size_and_capacity_errors() {
    let blob = sample_blob(BlobKind::Model, 0);
    let odd = Geometry {
        erase: 3000,
        write: 4,
        read: 1,
    };
    assert!(matches!(
        write_image(&blob, odd, 6000),
        Err(ImageError::Geometry { .. })
    ));
    let wide = Geometry {
        erase: 1024,
        write: 128,
        read: 1,
    };
    assert!(matches!(
        read_latest(&[0xFF; 2048], wide),
        Err(ImageError::Geometry { .. })
    ));
    let e = read_latest(&[0xFF; 8000], NRF)
        .map(|_| ())
        .expect_err("8000 B is not a whole number of 1 KiB sectors");
    assert!(e.to_string().contains("8000 B"), "{e}");
    // A checkpoint of the sample model is larger than the 1004 B slot of a 2 KiB region.
    let big = sample_blob(BlobKind::Checkpoint, 1);
    assert!(big.len() > 1004);
    let e = write_image(&big, NRF, 2048)
        .map(|_| ())
        .expect_err("a 2 KiB region is too small");
    let ImageError::TooLarge {
        len,
        capacity,
        region_needed,
    } = e
    else {
        panic!("expected TooLarge, got {e:?}");
    };
    assert_eq!((len as usize, capacity), (big.len(), 1004));
    // The region named is enough, and one sector pair less is not.
    assert!(write_image(&big, NRF, region_needed as u32).is_ok());
    assert!(write_image(&big, NRF, region_needed as u32 - 2048).is_err());
    let e = write_image(b"HONBxx", NRF, 8192)
        .map(|_| ())
        .expect_err("not a blob");
    assert!(matches!(e, ImageError::BlobRejected { .. }), "{e:?}");
}

#[test]
fn file_errors_name_the_file() {
    let dir = std::env::temp_dir().join(format!("hone-checkpoint-test-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join("unit7.img");
    std::fs::write(&path, vec![0xFF; 4096]).unwrap();
    let e = read_latest_file(&path, NRF)
        .map(|_| ())
        .expect_err("blank image");
    let text = e.to_string();
    assert!(text.starts_with(&path.display().to_string()), "{text}");
    assert!(text.contains("no valid checkpoint"), "{text}");
    let missing = dir.join("missing.img");
    let e = read_latest_file(&missing, NRF)
        .map(|_| ())
        .expect_err("missing file");
    assert!(matches!(e, CheckpointError::Io { .. }));
    std::fs::remove_dir_all(&dir).unwrap();
}

#[test]
fn setting_errors_name_the_option_not_the_blob() {
    let dir = tempfile::tempdir().unwrap();
    let blob_path = dir.path().join("unit7.honb");
    std::fs::write(&blob_path, sample_blob(BlobKind::Model, 0)).unwrap();
    let blob_name = blob_path.display().to_string();
    let fails = |g: Geometry, region: u32| {
        write_image_file(&blob_path, g, region)
            .map(|_| ())
            .expect_err("a bad setting")
    };
    let option = |e: &CheckpointError| match e {
        CheckpointError::Setting { option, .. } => Some(*option),
        _ => None,
    };
    for (g, want) in [
        (Geometry { write: 0, ..NRF }, "--write"),
        (Geometry { write: 3, ..NRF }, "--write"),
        (Geometry { read: 128, ..NRF }, "--read"),
        (Geometry { erase: 1000, ..NRF }, "--erase"),
        (Geometry { erase: 0, ..NRF }, "--erase"),
    ] {
        let e = fails(g, 8192);
        assert_eq!(option(&e), Some(want), "{g:?}: {e}");
        let text = e.to_string();
        assert!(text.starts_with(&format!("{want}: ")), "{text}");
        assert!(!text.contains(&blob_name), "{text}");
        assert_eq!(
            check_geometry(g).map_err(|e| option(&e)),
            Err(Some(want)),
            "{g:?}"
        );
    }
    assert!(check_geometry(NRF).is_ok());
    // One sector cannot hold the store's two slots; 1500 B is not whole sectors.
    for region in [1024, 1500] {
        let e = fails(NRF, region);
        assert_eq!(option(&e), Some("--region"), "{region}: {e}");
        assert!(!e.to_string().contains(&blob_name), "{e}");
    }
    // A bad blob is still the blob file's fault.
    std::fs::write(&blob_path, b"HONBxx").unwrap();
    let e = fails(NRF, 8192);
    assert!(e.to_string().starts_with(&blob_name), "{e}");
    // Reading an image with a bad geometry names the option too.
    let img = dir.path().join("a.img");
    std::fs::write(&img, vec![0xFF; 8192]).unwrap();
    let e = read_latest_file(&img, Geometry { write: 0, ..NRF })
        .map(|_| ())
        .expect_err("bad geometry");
    assert_eq!(option(&e), Some("--write"), "{e}");
}
