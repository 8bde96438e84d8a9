//! File-system traps: symbolic-link loops, files that vanish while stamping, files that cannot
//! be read, non-UTF-8 names, a repository inside a repository, bare and shallow repositories, a
//! detached HEAD and a corrupted git object. Each gives a usable manifest (exit 0, written),
//! with a warning where something could not be recorded. Facts are checked against `git`.
//!
//! The tests run as root, so a folder made unreadable with `chmod` would still be read; the
//! unreadable cases use what even root cannot read as a file: a FIFO (opening it would block), a
//! dangling symbolic link, and a link loop.

mod common;

use std::path::Path;

use common::{git, mkfifo, repo_with, write_files};
use runprint::manifest::Manifest;

/// Stamps `dir` with extra arguments; asserts exit 0 and returns the manifest and stderr.
fn stamp(dir: &Path, args: &[&str]) -> (Manifest, String) {
    stamp_env(dir, args, &[])
}

fn stamp_env(dir: &Path, args: &[&str], env: &[(&str, &str)]) -> (Manifest, String) {
    let (m, _, stderr) = common::stamp_quiet(dir, args, env);
    assert!(!m.is_modified());
    (m, stderr)
}

#[test]
fn symlink_loops_give_a_warning_and_a_manifest() {
    let repo = repo_with(&[("requirements.txt", "numpy==1.26.4\n")]);
    let data = repo.path().join("data");
    std::fs::create_dir(&data).unwrap();
    std::fs::write(data.join("a.csv"), "1\n").unwrap();
    std::os::unix::fs::symlink(".", data.join("loop")).unwrap();
    std::os::unix::fs::symlink("x", repo.path().join("y")).unwrap();
    std::os::unix::fs::symlink("y", repo.path().join("x")).unwrap();
    let (m, _) = stamp(repo.path(), &["--data", data.to_str().unwrap()]);
    assert_eq!(m.content.lockfiles.len(), 1);
    assert_eq!(m.content.data[0].files, 1);
    assert!(
        m.run.warnings.iter().any(|w| w.contains("loop")),
        "{:?}",
        m.run.warnings
    );
    // The link loop is an untracked change like any other.
    assert!(m.content.git.changed_paths.contains(&"x".to_string()));
}

#[test]
fn fifos_and_dangling_links_are_never_opened() {
    let repo = repo_with(&[("requirements.txt", "numpy==1.26.4\n")]);
    let fifo = repo.path().join("stream.fifo");
    mkfifo(&fifo);
    // A FIFO where a lockfile is expected, inside a data folder, and as an untracked file.
    let sub = repo.path().join("sub");
    std::fs::create_dir(&sub).unwrap();
    mkfifo(&sub.join("requirements.txt"));
    let data = repo.path().join("data");
    std::fs::create_dir(&data).unwrap();
    std::fs::write(data.join("a.csv"), "1\n").unwrap();
    mkfifo(&data.join("pipe"));
    std::os::unix::fs::symlink("/nonexistent/target", repo.path().join("Cargo.lock")).unwrap();
    let dangling = repo.path().join("gone.csv");
    std::os::unix::fs::symlink("/nonexistent/data", &dangling).unwrap();
    // An include that names a FIFO.
    std::fs::write(repo.path().join("requirements-all.txt"), "-r stream.fifo\n").unwrap();

    let (m, _) = stamp(
        repo.path(),
        &[
            "--lockfile",
            sub.join("requirements.txt").to_str().unwrap(),
            "--data",
            fifo.to_str().unwrap(),
            "--data",
            dangling.to_str().unwrap(),
            "--data",
            data.to_str().unwrap(),
        ],
    );
    let w = m.run.warnings.join("\n");
    assert!(
        w.contains("sub/requirements.txt") && w.contains("not a regular file"),
        "{w}"
    );
    assert!(w.contains("stream.fifo"), "{w}");
    assert!(w.contains("gone.csv"), "{w}");
    assert_eq!(m.content.data.len(), 1);
    assert_eq!(m.content.data[0].files, 1);
    assert!(m
        .content
        .lockfiles
        .iter()
        .any(|l| l.path == "requirements.txt"));
}

#[test]
fn files_vanishing_while_stamping_do_not_break_it() {
    let repo = repo_with(&[("requirements.txt", "numpy==1.26.4\n")]);
    let data = repo.path().join("data");
    std::fs::create_dir(&data).unwrap();
    for i in 0..50 {
        std::fs::write(data.join(format!("keep-{i}.csv")), vec![b'x'; 20_000]).unwrap();
    }
    let stop = std::sync::Arc::new(std::sync::atomic::AtomicBool::new(false));
    let churn = {
        let (stop, data, root) = (stop.clone(), data.clone(), repo.path().to_path_buf());
        std::thread::spawn(move || {
            let mut i = 0u64;
            while !stop.load(std::sync::atomic::Ordering::Relaxed) {
                let f = data.join(format!("tmp-{}.csv", i % 40));
                let g = root.join(format!("untracked-{}.txt", i % 40));
                let _ = std::fs::write(&f, vec![b'y'; 10_000]);
                let _ = std::fs::write(&g, "z");
                let _ = std::fs::remove_file(data.join(format!("tmp-{}.csv", (i + 20) % 40)));
                let _ = std::fs::remove_file(root.join(format!("untracked-{}.txt", (i + 20) % 40)));
                i += 1;
            }
        })
    };
    for _ in 0..8 {
        let (m, _) = stamp(repo.path(), &["--data", data.to_str().unwrap(), "--rehash"]);
        assert!(m.content.data[0].files >= 50);
    }
    stop.store(true, std::sync::atomic::Ordering::Relaxed);
    churn.join().unwrap();
}

#[test]
fn non_utf8_file_names_are_recorded() {
    use std::os::unix::ffi::OsStrExt;
    let repo = repo_with(&[("a.txt", "a\n")]);
    let name = std::ffi::OsStr::from_bytes(b"caf\xe9.csv");
    std::fs::write(repo.path().join(name), "1\n").unwrap();
    let data = repo.path().join("data");
    std::fs::create_dir(&data).unwrap();
    std::fs::write(data.join(name), "2\n").unwrap();
    let (m, _) = stamp(repo.path(), &["--data", data.to_str().unwrap()]);
    assert!(m.content.git.dirty);
    assert!(m
        .content
        .git
        .changed_paths
        .iter()
        .any(|p| p.starts_with("caf") && p.ends_with(".csv")));
    assert_eq!(m.content.data[0].files, 1);
    // Another content under the same non-UTF-8 name changes the digest of the change.
    let before = m.content.git.dirty_digest.clone();
    std::fs::write(repo.path().join(name), "changed\n").unwrap();
    let (m, _) = stamp(repo.path(), &[]);
    assert_ne!(m.content.git.dirty_digest, before);
}

#[test]
fn nested_bare_shallow_and_detached_repositories() {
    // A repository inside a repository (not a submodule).
    let outer = repo_with(&[("a.txt", "a\n")]);
    let inner_dir = outer.path().join("vendor/inner");
    std::fs::create_dir_all(&inner_dir).unwrap();
    git(&inner_dir, &["init", "-q", "-b", "main"]);
    write_files(&inner_dir, &[("b.txt", "b\n")]);
    git(&inner_dir, &["add", "-A"]);
    git(
        &inner_dir,
        &[
            "-c",
            "user.name=T",
            "-c",
            "user.email=t@example.invalid",
            "commit",
            "-q",
            "-m",
            "i",
        ],
    );
    let (m, _) = stamp(outer.path(), &[]);
    assert_eq!(
        m.content.git.commit.as_deref(),
        Some(git(outer.path(), &["rev-parse", "HEAD"]).as_str())
    );
    let (m, _) = stamp(&inner_dir, &[]);
    assert_eq!(
        m.content.git.commit.as_deref(),
        Some(git(&inner_dir, &["rev-parse", "HEAD"]).as_str())
    );

    // A bare repository: a commit, no work tree.
    let bare = tempfile::tempdir().unwrap();
    git(
        bare.path(),
        &[
            "clone",
            "-q",
            "--bare",
            outer.path().to_str().unwrap(),
            "b.git",
        ],
    );
    let (m, _) = stamp(&bare.path().join("b.git"), &[]);
    assert!(m.content.git.present);
    assert_eq!(
        m.content.git.commit,
        Some(git(outer.path(), &["rev-parse", "HEAD"]))
    );
    assert!(!m.content.git.dirty);

    // A shallow clone.
    write_files(outer.path(), &[("a.txt", "a2\n")]);
    git(outer.path(), &["commit", "-q", "-am", "second"]);
    let shallow = tempfile::tempdir().unwrap();
    git(
        shallow.path(),
        &[
            "clone",
            "-q",
            "--depth",
            "1",
            &format!("file://{}", outer.path().display()),
            "s",
        ],
    );
    let s = shallow.path().join("s");
    assert_eq!(git(&s, &["rev-parse", "--is-shallow-repository"]), "true");
    let (m, _) = stamp(&s, &[]);
    assert_eq!(m.content.git.commit, Some(git(&s, &["rev-parse", "HEAD"])));

    // A detached HEAD.
    git(outer.path(), &["checkout", "-q", "--detach", "HEAD~1"]);
    let (m, _) = stamp(outer.path(), &[]);
    assert!(m.content.git.detached);
    assert_eq!(m.content.git.branch, None);
    assert_eq!(
        m.content.git.commit,
        Some(git(outer.path(), &["rev-parse", "HEAD"]))
    );
}

/// Truncates the loose object of the HEAD commit (the damage a full disk or a killed copy
/// leaves).
fn corrupt_head_commit(repo: &Path) {
    let head = git(repo, &["rev-parse", "HEAD"]);
    let object = repo.join(".git/objects").join(&head[..2]).join(&head[2..]);
    let bytes = std::fs::read(&object).unwrap();
    let mut perms = std::fs::metadata(&object).unwrap().permissions();
    #[allow(clippy::permissions_set_readonly_false)]
    perms.set_readonly(false);
    std::fs::set_permissions(&object, perms).unwrap();
    std::fs::write(&object, &bytes[..bytes.len() / 2]).unwrap();
}

#[test]
fn a_corrupted_git_object_gives_git_s_own_warning_and_a_manifest() {
    let repo = repo_with(&[("requirements.txt", "numpy==1.26.4\n"), ("b.txt", "b\n")]);
    corrupt_head_commit(repo.path());
    // Reference: `git status` itself fails on this object and says so (git 2.47:
    // "fatal: loose object ... is corrupt"); the stamp passes that on instead of waiting for
    // the watchdog, however long its timeout.
    let status = std::process::Command::new("git")
        .args(["status", "--porcelain"])
        .current_dir(repo.path())
        .output()
        .unwrap();
    assert!(!status.status.success());
    let (m, stderr) = stamp_env(repo.path(), &[], &[("RUNPRINT_GIT_TIMEOUT_SECS", "600")]);
    let warning = m
        .run
        .warnings
        .iter()
        .find(|w| w.starts_with("git:"))
        .unwrap_or_else(|| panic!("{:?} {stderr}", m.run.warnings));
    assert!(warning.contains("corrupt"), "{warning}");
    assert!(!warning.contains("no answer"), "{warning}");
    // The rest is still recorded.
    assert_eq!(m.content.lockfiles.len(), 1);
    assert!(!m.content.cpu.arch.is_empty());
}

#[test]
fn a_corrupted_git_object_without_git_on_path_stops_at_the_timeout() {
    let repo = repo_with(&[("requirements.txt", "numpy==1.26.4\n"), ("b.txt", "b\n")]);
    corrupt_head_commit(repo.path());
    let no_git = tempfile::tempdir().unwrap();
    // libgit2 loops forever on this object; the watchdog gives up after the timeout.
    let (m, stderr) = stamp_env(
        repo.path(),
        &[],
        &[
            ("RUNPRINT_GIT_TIMEOUT_SECS", "3"),
            ("PATH", no_git.path().to_str().unwrap()),
        ],
    );
    assert!(
        m.run.warnings.iter().any(|w| w.starts_with("git:")),
        "{:?} {stderr}",
        m.run.warnings
    );
    assert_eq!(m.content.lockfiles.len(), 1);
    assert!(!m.content.cpu.arch.is_empty());
}

/// Names of this process's threads (Linux `/proc/self/task/*/comm`).
fn thread_names() -> Vec<String> {
    std::fs::read_dir("/proc/self/task")
        .unwrap()
        .filter_map(|t| std::fs::read_to_string(t.ok()?.path().join("comm")).ok())
        .map(|n| n.trim().to_string())
        .collect()
}

/// A library user stamping the same damaged repository again does not pile up stuck threads:
/// the second stamp answers at once from what the first one learnt.
#[test]
fn a_stuck_git_library_read_is_not_started_twice() {
    let repo = repo_with(&[("requirements.txt", "numpy==1.26.4\n")]);
    corrupt_head_commit(repo.path());
    let no_git = tempfile::tempdir().unwrap();
    let mut opts = runprint::collect::StampOptions::new(repo.path());
    opts.env
        .insert("PATH".into(), no_git.path().to_str().unwrap().into());
    opts.env
        .insert("RUNPRINT_GIT_TIMEOUT_SECS".into(), "1".into());
    opts.python = vec![no_git.path().join("no-python")];
    let first = runprint::collect::stamp(&opts);
    assert!(
        first.run.warnings.iter().any(|w| w.contains("no answer")),
        "{:?}",
        first.run.warnings
    );
    let second = runprint::collect::stamp(&opts);
    assert!(
        second
            .run
            .warnings
            .iter()
            .any(|w| w.contains("has not finished")),
        "{:?}",
        second.run.warnings
    );
    let stuck = thread_names()
        .iter()
        .filter(|n| n.as_str() == "runprint-git")
        .count();
    assert_eq!(stuck, 1, "{:?}", thread_names());
}

/// A `git` that never answers is killed at the timeout; no process is left behind.
#[test]
fn a_hanging_git_executable_is_killed_at_the_timeout() {
    let repo = repo_with(&[("requirements.txt", "numpy==1.26.4\n")]);
    let bin = tempfile::tempdir().unwrap();
    let pid_file = bin.path().join("pid");
    let fake = bin.path().join("git");
    std::fs::write(
        &fake,
        format!(
            "#!/bin/sh\necho $$ > '{}'\nexec sleep 300\n",
            pid_file.display()
        ),
    )
    .unwrap();
    std::fs::set_permissions(&fake, std::os::unix::fs::PermissionsExt::from_mode(0o755)).unwrap();
    let path = format!("{}:/usr/bin:/bin", bin.path().display());
    let (m, stderr) = stamp_env(
        repo.path(),
        &[],
        &[("RUNPRINT_GIT_TIMEOUT_SECS", "2"), ("PATH", &path)],
    );
    assert!(
        m.run.warnings.iter().any(|w| w.contains("was stopped")),
        "{:?} {stderr}",
        m.run.warnings
    );
    let pid = std::fs::read_to_string(&pid_file).unwrap();
    assert!(
        !Path::new("/proc").join(pid.trim()).exists(),
        "the hanging git (pid {pid}) is still running"
    );
    assert_eq!(m.content.lockfiles.len(), 1);
}
