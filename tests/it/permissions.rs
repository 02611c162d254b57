//! Files waymark writes (indexes, the ground-truth cache) get the mode a new
//! file would under the process umask.

use std::os::unix::fs::PermissionsExt;
use std::path::Path;
use std::process::Command;

/// Runs the binary with `args` in `dir` under `umask` (through `sh`, which sets it for the
/// child only) and checks that it succeeds.
fn waymark_under_umask(dir: &Path, umask: &str, args: &[&str]) {
    let out = Command::new("sh")
        .arg("-c")
        .arg(format!("umask {umask} && exec \"$0\" \"$@\""))
        .arg(env!("CARGO_BIN_EXE_waymark"))
        .args(args)
        .current_dir(dir)
        .output()
        .expect("sh runs");
    assert!(
        out.status.success(),
        "waymark {args:?} under umask {umask}: {}",
        String::from_utf8_lossy(&out.stderr)
    );
}

/// The permission bits of `path`, in octal.
fn mode(path: &Path) -> String {
    let m = std::fs::metadata(path)
        .expect("written")
        .permissions()
        .mode();
    format!("{:o}", m & 0o777)
}

/// The first 400 demo names and 20 look-ups, copied into `dir`.
fn small_demo(dir: &Path) {
    let root = Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data");
    let take = |file: &str, n: usize| -> String {
        std::fs::read_to_string(root.join(file))
            .unwrap()
            .lines()
            .take(n)
            .map(|l| format!("{l}\n"))
            .collect()
    };
    std::fs::write(dir.join("names.txt"), take("names.txt", 400)).unwrap();
    std::fs::write(dir.join("lookups.txt"), take("lookups.txt", 20)).unwrap();
}

/// An index and the ground-truth cache get 0666 minus the umask, like any new file (so a
/// service running as another user can read an index built under umask 022), not the
/// 0600 of a temporary file.
#[test]
fn written_files_follow_the_umask() {
    let dir = tempfile::tempdir().unwrap();
    small_demo(dir.path());
    for (umask, want) in [("022", "644"), ("027", "640"), ("077", "600")] {
        let index = format!("names-{umask}.wmk");
        waymark_under_umask(
            dir.path(),
            umask,
            &["build", "names.txt", "-o", &index, "--dim", "4"],
        );
        assert_eq!(
            mode(&dir.path().join(&index)),
            want,
            "index built under umask {umask}"
        );
        // Rebuilding over an existing file gives the same mode.
        waymark_under_umask(
            dir.path(),
            umask,
            &["build", "names.txt", "-o", &index, "--dim", "4"],
        );
        assert_eq!(mode(&dir.path().join(&index)), want, "rebuilt index");

        let queries = format!("lookups-{umask}.txt");
        std::fs::copy(dir.path().join("lookups.txt"), dir.path().join(&queries)).unwrap();
        waymark_under_umask(
            dir.path(),
            umask,
            &["eval", &index, "--queries", &queries, "-k", "3"],
        );
        let caches: Vec<_> = std::fs::read_dir(dir.path())
            .unwrap()
            .map(|e| e.unwrap().path())
            .filter(|p| {
                p.file_name()
                    .and_then(|n| n.to_str())
                    .is_some_and(|n| n.starts_with(&format!("{queries}.truth-")))
            })
            .collect();
        assert_eq!(caches.len(), 1, "one ground-truth cache: {caches:?}");
        assert_eq!(mode(&caches[0]), want, "cache written under umask {umask}");
    }
}
