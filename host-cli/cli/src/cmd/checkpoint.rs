//! `hone checkpoint …`: read or write the checkpoint area of a flash image.

use crate::*;

pub(crate) fn geometry(g: &GeometryArgs) -> hone_host::checkpoint::Geometry {
    hone_host::checkpoint::Geometry {
        erase: g.erase,
        write: g.write,
        read: g.read,
    }
}
pub(crate) fn checkpoint(c: CheckpointCmd) -> Result<Option<CheckFailed>> {
    match c {
        CheckpointCmd::Read {
            image,
            geometry: g,
            out,
            json,
        } => {
            if let Some(p) = &out {
                distinct(&[("the image", &image)], &[("--out", p)])?;
            }
            let (info, blob) = hone_host::checkpoint::read_latest_file(&image, geometry(&g))?;
            if let Some(p) = &out {
                hone_report::fsutil::write_atomic(p, &blob)
                    .with_context(|| p.display().to_string())?;
            }
            let report = hone_host::inspect::inspect(&image.display().to_string(), &blob)?;
            if json {
                print_json(&serde_json::json!({ "checkpoint": info, "blob": report }))?;
            } else {
                outln!(
                    "checkpoint seq {} in slot {} ({} bytes); other slot {}: {}",
                    info.seq,
                    info.slot,
                    info.len,
                    info.other_slot.slot,
                    info.other_slot.state
                );
                out!("{}", hone_host::inspect::render(&report));
            }
            Ok(None)
        }
        CheckpointCmd::Write {
            blob,
            out,
            into,
            region,
            start_over,
            geometry: g,
        } => {
            // `--out` may be the `--into` image: updating it in place is the point.
            distinct(&[("the blob", &blob)], &[("--out", &out)])?;
            let image = match &into {
                Some(existing) => {
                    let (_, len) = hone_host::checkpoint::commit_file(
                        existing,
                        geometry(&g),
                        &blob,
                        &out,
                        start_over,
                    )?;
                    outln!("written: {} ({len} bytes)", out.display());
                    return Ok(None);
                }
                None => {
                    let region_len = size(&region, "region")?;
                    hone_host::checkpoint::check_geometry(geometry(&g))?;
                    if !region_len.is_multiple_of(g.erase) {
                        return Err(anyhow!(
                            "--region: {region_len} B is not a whole number of {} B erase \
                             sectors; give the size of the device's checkpoint area, a multiple \
                             of --erase",
                            g.erase
                        ));
                    }
                    hone_host::checkpoint::write_image_file(&blob, geometry(&g), region_len)?
                }
            };
            hone_report::fsutil::write_atomic(&out, &image)
                .with_context(|| out.display().to_string())?;
            outln!("written: {} ({} bytes)", out.display(), image.len());
            Ok(None)
        }
    }
}
