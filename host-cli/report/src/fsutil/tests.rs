use super::*;

fn entries(dir: &Path) -> Vec<String> {
    let mut v: Vec<String> = fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    v.sort();
    v
}

#[test]
fn writes_and_replaces() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("model.bin");
    write_atomic(&p, b"first").unwrap();
    assert_eq!(fs::read(&p).unwrap(), b"first");
    write_atomic(&p, b"second, longer").unwrap();
    assert_eq!(fs::read(&p).unwrap(), b"second, longer");
    assert_eq!(entries(dir.path()), ["model.bin"]);
}

#[test]
fn failure_mid_way_leaves_target_and_no_temp_file() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("report.json");
    write_atomic(&p, b"old").unwrap();
    let e = write_atomic_with(&p, |w| {
        // More than the buffer holds, so part of it reaches the temporary file.
        w.write_all(&vec![b'x'; 64 * 1024])?;
        Err(io::Error::other("disk full"))
    })
    .unwrap_err();
    assert_eq!(e.to_string(), "disk full");
    assert_eq!(fs::read(&p).unwrap(), b"old");
    assert_eq!(entries(dir.path()), ["report.json"]);
}

#[test]
fn failed_rename_removes_the_temp_file() {
    let dir = tempfile::tempdir().unwrap();
    // A non-empty directory in the target's place makes the rename fail.
    let p = dir.path().join("out");
    fs::create_dir(&p).unwrap();
    fs::write(p.join("keep"), b"k").unwrap();
    assert!(write_atomic(&p, b"data").is_err());
    assert_eq!(entries(dir.path()), ["out"]);
    assert_eq!(entries(&p), ["keep"]);
}

#[test]
fn write_all_writes_every_file() {
    let dir = tempfile::tempdir().unwrap();
    let (a, b) = (dir.path().join("m.honb"), dir.path().join("m.rs"));
    write_atomic(&a, b"old blob").unwrap();
    write_all(&[(&a, b"new blob"), (&b, b"pub const X: u8 = 1;")]).unwrap();
    assert_eq!(fs::read(&a).unwrap(), b"new blob");
    assert_eq!(fs::read(&b).unwrap(), b"pub const X: u8 = 1;");
    assert_eq!(entries(dir.path()), ["m.honb", "m.rs"]);
}

#[test]
fn write_all_failing_second_file_leaves_the_first_untouched() {
    let dir = tempfile::tempdir().unwrap();
    let first = dir.path().join("m.honb");
    let second = dir.path().join("no-such-dir").join("m.rs");
    // A fresh target stays absent, an existing one keeps its bytes.
    let e = write_all(&[(&first, b"blob"), (&second, b"src")]).unwrap_err();
    assert_eq!(e.path, second);
    assert!(e.to_string().starts_with(&second.display().to_string()));
    assert_eq!(entries(dir.path()), Vec::<String>::new());
    write_atomic(&first, b"old").unwrap();
    assert!(write_all(&[(&first, b"new"), (&second, b"src")]).is_err());
    assert_eq!(fs::read(&first).unwrap(), b"old");
    assert_eq!(entries(dir.path()), ["m.honb"]);
}

#[test]
fn write_all_refuses_a_directory_target_before_writing_any() {
    let dir = tempfile::tempdir().unwrap();
    let (a, b, c) = (
        dir.path().join("a"),
        dir.path().join("b"),
        dir.path().join("c"),
    );
    // A non-empty directory in the second target's place is refused while staging, so
    // no file of the set is written and no temporary file stays.
    fs::create_dir(&b).unwrap();
    fs::write(b.join("keep"), b"k").unwrap();
    let e = write_all(&[(&a, b"1"), (&b, b"2"), (&c, b"3")]).unwrap_err();
    assert_eq!(e.path, b);
    assert!(e.to_string().contains("directory"), "{e}");
    assert_eq!(entries(dir.path()), ["b"]);
    assert_eq!(entries(&b), ["keep"]);
}

#[cfg(unix)]
#[test]
fn symbolic_links_are_refused_and_left_alone() {
    let dir = tempfile::tempdir().unwrap();
    let target = dir.path().join("real");
    fs::write(&target, b"kept").unwrap();
    let link = dir.path().join("link");
    std::os::unix::fs::symlink(&target, &link).unwrap();
    let e = write_atomic(&link, b"new").unwrap_err();
    assert_eq!(e.kind(), io::ErrorKind::InvalidInput);
    assert!(fs::symlink_metadata(&link)
        .unwrap()
        .file_type()
        .is_symlink());
    assert_eq!(fs::read(&target).unwrap(), b"kept");
    assert_eq!(entries(dir.path()), ["link", "real"]);
}

#[test]
fn stale_temporaries_are_removed_live_ones_kept() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("img.bin");
    // A temporary file left by a killed writer holds no lock.
    fs::write(dir.path().join(".img.bin.Ab12Cd.tmp"), b"stale").unwrap();
    // One a living writer holds stays; so does a file of another name.
    let live = create_temp(dir.path(), "img.bin").unwrap();
    fs::write(dir.path().join(".img.bin.x.y.tmp"), b"other").unwrap();
    write_atomic(&p, b"new").unwrap();
    let mut want = vec![
        ".img.bin.x.y.tmp".to_owned(),
        live.path()
            .file_name()
            .unwrap()
            .to_string_lossy()
            .into_owned(),
        "img.bin".to_owned(),
    ];
    want.sort();
    assert_eq!(entries(dir.path()), want);
    drop(live);
    assert_eq!(entries(dir.path()), [".img.bin.x.y.tmp", "img.bin"]);
}

#[cfg(unix)]
#[test]
fn outputs_get_the_permissions_of_a_new_file() {
    use std::os::unix::fs::PermissionsExt;
    let dir = tempfile::tempdir().unwrap();
    let plain = dir.path().join("plain");
    fs::write(&plain, b"x").unwrap();
    let p = dir.path().join("atomic");
    write_atomic(&p, b"x").unwrap();
    let mode = |p: &Path| fs::metadata(p).unwrap().permissions().mode() & 0o777;
    assert_eq!(mode(&p), mode(&plain));
}

#[test]
fn reads_are_bounded() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("f");
    fs::write(&p, [7u8; 100]).unwrap();
    assert_eq!(read_limited(&p, 100, "blob").unwrap().len(), 100);
    let e = read_limited(&p, 99, "blob").unwrap_err();
    assert_eq!(e.kind(), io::ErrorKind::InvalidData);
    assert!(
        e.to_string().contains("100 bytes") && e.to_string().contains("99"),
        "{e}"
    );
    assert!(read_limited(dir.path(), 99, "blob").is_err());
    fs::write(&p, b"a = 1\nb = \"\xff\"\n").unwrap();
    let e = read_text_limited(&p, 100, "config").unwrap_err();
    assert!(e.to_string().starts_with("line 2, column 6:"), "{e}");
}

#[test]
fn outputs_twice_or_equal_to_an_input_are_refused() {
    let dir = tempfile::tempdir().unwrap();
    let input = dir.path().join("d.csv");
    fs::write(&input, b"x").unwrap();
    let out = dir.path().join("m.json");
    let dotted = dir.path().join(".").join("m.json");
    assert!(check_outputs(&[("--data", &input)], &[("--out", &out)]).is_ok());
    let e = check_outputs(&[], &[("--blob", &out), ("--rust", &dotted)]).unwrap_err();
    assert!(matches!(e, OutputError::Twice { .. }), "{e}");
    assert!(e.to_string().starts_with("--blob and --rust"), "{e}");
    let e = check_outputs(&[("--data", &input)], &[("--out", &input)]).unwrap_err();
    assert!(e.to_string().contains("the input --data"), "{e}");
}

#[test]
fn echoed_values_are_cut_and_escaped() {
    assert_eq!(echo("abc", 5), "abc");
    assert_eq!(echo("a\0b\n", 5), "a\\u{0}b\\n");
    assert_eq!(echo(&"x".repeat(10), 4), "xxxx… (6 more characters)");
}

#[test]
fn write_all_in_creates_the_folder_and_removes_it_on_failure() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("report").join("inner");
    let files = vec![
        ("r.md".to_owned(), b"# r".to_vec()),
        ("r.html".to_owned(), b"<html>".to_vec()),
    ];
    let written = write_all_in(&out, &files).unwrap();
    assert_eq!(written, [out.join("r.md"), out.join("r.html")]);
    assert_eq!(entries(&out), ["r.html", "r.md"]);

    // A file name with a missing directory fails staging: the folders made for the set
    // are removed again, a folder that existed before stays.
    let fresh = dir.path().join("fresh").join("deeper");
    let bad = vec![
        ("ok.md".to_owned(), b"x".to_vec()),
        ("missing/x.svg".to_owned(), b"y".to_vec()),
    ];
    let e = write_all_in(&fresh, &bad).unwrap_err();
    assert_eq!(e.path, fresh.join("missing/x.svg"));
    assert!(!dir.path().join("fresh").exists());
    assert!(write_all_in(&out, &bad).is_err());
    assert_eq!(entries(&out), ["r.html", "r.md"]);
}

#[test]
fn missing_directory_and_no_file_name_are_errors() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("no-such-dir").join("f.bin");
    assert!(write_atomic(&p, b"x").is_err());
    assert!(!p.exists());
    // `..` names a directory, not a file.
    assert!(write_atomic(Path::new(".."), b"x").is_err());
}
