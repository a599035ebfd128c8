//! Writes seed corpora for the fuzz targets into `corpus/<target>/` (relative to the current
//! directory, normally `fuzz/`): valid model and checkpoint blobs, their bodies for the
//! body-framed targets, and flash images holding them for the store target.

use std::fs;
use std::path::Path;

use hone_core::store::sim::SimFlash;
use hone_core::store::Store;

fn write(dir: &Path, name: &str, bytes: &[u8]) {
    fs::create_dir_all(dir).expect("create corpus directory");
    fs::write(dir.join(name), bytes).expect("write seed");
}

fn main() {
    let root = Path::new("corpus");
    let seeds = hone_fuzz::seed_blobs();
    for (name, blob) in &seeds {
        assert!(
            hone_fuzz::check_blob(blob).is_some(),
            "seed {name} must decode"
        );
        write(&root.join("blob_decode"), name, blob);
        write(&root.join("blob_body"), name, hone_fuzz::body_of(blob));
        write(
            &root.join("trainer_restore"),
            name,
            hone_fuzz::body_of(blob),
        );
        // Flash images: the blob committed once (slot A) or twice (both slots), for each
        // geometry; the first byte selects the geometry as the store target reads it.
        for (g, &(size, ..)) in hone_fuzz::GEOMETRIES.iter().enumerate() {
            for commits in 1..=2u8 {
                let image = match g {
                    0 => image::<8192, 1024, 4, 1>(blob, commits),
                    1 => image::<4096, 256, 16, 8>(blob, commits),
                    _ => image::<2048, 128, 1, 1>(blob, commits),
                };
                let Some(image) = image else { continue };
                assert_eq!(image.len(), size);
                let mut input = vec![g as u8];
                input.extend_from_slice(&image);
                write(
                    &root.join("store_open"),
                    &format!("{name}-g{g}-c{commits}"),
                    &input,
                );
            }
        }
    }
    let host = hone_fuzz::host::host_seeds();
    for (target, name, bytes) in &host {
        write(&root.join(target), name, bytes);
    }
    println!(
        "wrote {} seed blobs and {} host seeds under {}",
        seeds.len(),
        host.len(),
        root.display()
    );
}

fn image<const S: usize, const E: usize, const W: usize, const R: usize>(
    blob: &[u8],
    commits: u8,
) -> Option<Vec<u8>> {
    let mut flash = SimFlash::<S, E, W, R>::new();
    {
        let mut store = Store::open(&mut flash, 0, S as u32).ok()?;
        for _ in 0..commits {
            store.commit(blob).ok()?;
        }
    }
    Some(flash.bytes().to_vec())
}
