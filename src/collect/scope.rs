//! The training job's scope: the repository files its Python entry points import (the static
//! import closure), the third-party modules they import, and every package those can load.
//!
//! Resolution follows the import system as the language reference describes it ("The import
//! system", 5.2–5.5): a module `a.b.c` is found on the search path as `a/b/c.py` or
//! `a/b/c/__init__.py`, importing it runs `a/__init__.py` and `a/b/__init__.py` first, and a
//! folder without `__init__.py` is a namespace package. The search path is the entry script's
//! folder (Python puts it first on `sys.path`), the repository root, every `src/` folder, and
//! the folder of every `pyproject.toml`, `setup.py` or `setup.cfg` (an editable install of a
//! project puts its package root on the path) with its `src/`. Relative imports
//! (`from . import x`) are resolved from the importing file's folder.
//!
//! The closure is conservative: imports inside functions, `if` and `try` count; a star import
//! of a package adds its modules. It is marked incomplete (and then not used to judge
//! anything) when an entry point is missing or not Python, a file does not parse, or a module
//! is imported by a name computed at run time.
//!
//! Modules are mapped to distributions by facts: the installed `top_level.txt` files when an
//! interpreter was stamped, the distribution names of the installed environment and of the
//! Python lockfiles (PEP 503 normalized), and a documented table for the well-known names
//! that differ ([`KNOWN_MODULES`]). Dependencies are followed through the installed
//! `Requires-Dist` and the edges that uv.lock, poetry.lock, pdm.lock and pylock.toml record.
//! A module that maps to nothing, or a distribution whose dependencies are recorded nowhere,
//! leaves the package list out (no package is then judged out of scope).
//!
//! Files are identified by git blob ids (`git hash-object`): from the index for tracked,
//! unmodified files, computed for the others. Each file's imports are cached by blob id, so
//! an unchanged file is not parsed again.

use std::collections::{BTreeMap, BTreeSet, VecDeque};
use std::path::Path;

use crate::imports::{self, FileImports, Import};
use crate::lockfile::requirements::normalize_name;
use crate::manifest::{Lockfile, PythonEnv, Scope};

/// Modules whose distribution has another name: (module, distributions that provide it).
/// Common practice; each distribution's own documentation names the module it installs.
pub const KNOWN_MODULES: &[(&str, &[&str])] = &[
    ("sklearn", &["scikit-learn"]),
    ("skimage", &["scikit-image"]),
    (
        "cv2",
        &[
            "opencv-python",
            "opencv-python-headless",
            "opencv-contrib-python",
            "opencv-contrib-python-headless",
        ],
    ),
    ("PIL", &["pillow"]),
    ("yaml", &["pyyaml"]),
    ("bs4", &["beautifulsoup4"]),
    ("attr", &["attrs"]),
    ("dateutil", &["python-dateutil"]),
    ("dotenv", &["python-dotenv"]),
    ("jwt", &["pyjwt"]),
    ("google", &["protobuf", "google-auth", "google-api-core"]),
    ("OpenSSL", &["pyopenssl"]),
    ("Crypto", &["pycryptodome"]),
    ("serial", &["pyserial"]),
    ("git", &["gitpython"]),
    ("faiss", &["faiss-cpu", "faiss-gpu"]),
    ("pkg_resources", &["setuptools"]),
    ("mpl_toolkits", &["matplotlib"]),
    (
        "tensorflow",
        &["tensorflow", "tensorflow-cpu", "tensorflow-gpu"],
    ),
    ("onnxruntime", &["onnxruntime", "onnxruntime-gpu"]),
    ("lightning", &["lightning", "pytorch-lightning"]),
    ("pytorch_lightning", &["pytorch-lightning", "lightning"]),
    ("tree", &["dm-tree"]),
    ("Levenshtein", &["levenshtein", "python-levenshtein"]),
    ("magic", &["python-magic"]),
    ("docx", &["python-docx"]),
    ("fitz", &["pymupdf"]),
    ("zmq", &["pyzmq"]),
    ("_cffi_backend", &["cffi"]),
    ("typing_extensions", &["typing-extensions"]),
];

/// The scope a team declared: from `--entry` and the policy file's `[scope]`.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct Request {
    /// Entry points: files or Python modules.
    pub entry: Vec<String>,
    /// Globs of the lockfiles the job installs from (empty: every Python lockfile).
    pub lockfiles: Vec<String>,
    /// Globs of the configuration and data the job reads.
    pub reads: Vec<String>,
}

/// What the scope collector reads besides the files.
pub struct Inputs<'a> {
    /// The repository's work tree.
    pub root: &'a Path,
    /// The git index, when the work tree is a git repository.
    pub index: Option<&'a Path>,
    /// Paths whose content differs from the index (modified and untracked), relative.
    pub changed: &'a [String],
    /// The stamped Python environments.
    pub python: &'a [PythonEnv],
    /// The recorded lockfiles.
    pub lockfiles: &'a [Lockfile],
    /// The cache folder, for the imports of each blob.
    pub cache_dir: Option<&'a Path>,
}

/// The Python files of the work tree: path → blob id (`None`: not in the index as is; the
/// id is computed when the file is read).
struct Tree {
    files: BTreeMap<String, Option<String>>,
    dirs: BTreeSet<String>,
    markers: Vec<String>,
}

fn is_python(path: &str) -> bool {
    path.ends_with(".py") || path.ends_with(".ipynb")
}

const PROJECT_MARKERS: &[&str] = &["pyproject.toml", "setup.py", "setup.cfg"];

fn file_name(path: &str) -> &str {
    path.rsplit('/').next().unwrap_or(path)
}

fn parent(path: &str) -> &str {
    path.rsplit_once('/').map_or("", |(d, _)| d)
}

fn join(dir: &str, name: &str) -> String {
    if dir.is_empty() {
        name.to_string()
    } else {
        format!("{dir}/{name}")
    }
}

impl Tree {
    fn new() -> Tree {
        Tree {
            files: BTreeMap::new(),
            dirs: BTreeSet::new(),
            markers: Vec::new(),
        }
    }

    fn add(&mut self, path: String, blob: Option<String>) {
        if PROJECT_MARKERS.contains(&file_name(&path)) {
            self.markers.push(path.clone());
        }
        if !is_python(&path) {
            return;
        }
        let mut d = parent(&path);
        while !d.is_empty() && self.dirs.insert(d.to_string()) {
            d = parent(d);
        }
        self.files.insert(path, blob);
    }

    /// From the git index, with the changed paths read from disk.
    fn from_index(root: &Path, index: &Path, changed: &[String]) -> Option<Tree> {
        let index = git2::Index::open(index).ok()?;
        let mut tree = Tree::new();
        let changed: BTreeSet<&str> = changed.iter().map(String::as_str).collect();
        for e in index.iter() {
            let Ok(path) = String::from_utf8(e.path) else {
                continue;
            };
            if changed.contains(path.as_str()) {
                continue;
            }
            tree.add(path, Some(e.id.to_string()));
        }
        for path in changed {
            let on_disk = root.join(path);
            if on_disk.is_file() {
                tree.add(path.to_string(), None);
            }
        }
        Some(tree)
    }

    /// Outside git: the Python files under the root, skipping hidden folders, virtual
    /// environments and installed packages.
    fn walk(root: &Path) -> Tree {
        let mut tree = Tree::new();
        let skip = |name: &str| {
            name.starts_with('.')
                || matches!(
                    name,
                    "node_modules" | "site-packages" | "__pycache__" | "venv" | "env"
                )
        };
        let walker = walkdir::WalkDir::new(root)
            .follow_links(false)
            .max_depth(32)
            .into_iter()
            .filter_entry(|e| e.depth() == 0 || !skip(&e.file_name().to_string_lossy()));
        for entry in walker.flatten() {
            if !entry.file_type().is_file() {
                continue;
            }
            let Ok(rel) = entry.path().strip_prefix(root) else {
                continue;
            };
            if let Some(rel) = rel.to_str() {
                tree.add(rel.replace('\\', "/"), None);
            }
        }
        tree
    }

    /// Computes the blob id of every file the index does not give (changed files, or every
    /// file outside git), once: the result key and the parser both use them.
    fn fill_blobs(&mut self, root: &Path) {
        for (path, blob) in self.files.iter_mut().filter(|(_, b)| b.is_none()) {
            *blob = crate::limits::read_regular_file_nofollow(&root.join(path))
                .ok()
                .and_then(|bytes| git2::Oid::hash_object(git2::ObjectType::Blob, &bytes).ok())
                .map(|id| id.to_string());
        }
    }

    fn has_file(&self, path: &str) -> bool {
        self.files.contains_key(path)
    }

    fn has_dir(&self, path: &str) -> bool {
        path.is_empty() || self.dirs.contains(path)
    }
}

/// How an import resolved.
enum Resolved {
    /// Repository files (possibly none, when the module's top level is local but the module
    /// itself is not found).
    Local(Vec<String>),
    /// A top-level module from outside the repository.
    External(String),
}

struct Resolver<'t> {
    tree: &'t Tree,
    roots: Vec<String>,
}

impl Resolver<'_> {
    /// The files of module `dotted` under folder `base` (a package chain), or `None` when its
    /// first part is not there.
    fn under(&self, base: &str, dotted: &str) -> Option<Vec<String>> {
        let parts: Vec<&str> = dotted.split('.').filter(|p| !p.is_empty()).collect();
        let first = join(base, parts.first()?);
        if !self.tree.has_dir(&first) && !self.tree.has_file(&format!("{first}.py")) {
            return None;
        }
        let mut files = Vec::new();
        let mut acc = base.to_string();
        for (i, part) in parts.iter().enumerate() {
            acc = join(&acc, part);
            let init = format!("{acc}/__init__.py");
            let module = format!("{acc}.py");
            if i + 1 == parts.len() {
                if self.tree.has_file(&module) {
                    files.push(module);
                } else if self.tree.has_file(&init) {
                    files.push(init);
                }
            } else if self.tree.has_file(&init) {
                files.push(init);
            } else if !self.tree.has_dir(&acc) {
                break;
            }
        }
        Some(files)
    }

    fn absolute(&self, dotted: &str) -> Resolved {
        let mut found = None::<Vec<String>>;
        for root in &self.roots {
            if let Some(files) = self.under(root, dotted) {
                found.get_or_insert_with(Vec::new).extend(files);
            }
        }
        match found {
            Some(files) => Resolved::Local(files),
            None => Resolved::External(dotted.split('.').next().unwrap_or("").to_string()),
        }
    }

    /// The modules directly inside a package folder (for a star import).
    fn submodules(&self, dir: &str) -> Vec<String> {
        let prefix = format!("{dir}/");
        self.tree
            .files
            .range(prefix.clone()..)
            .take_while(|(p, _)| p.starts_with(&prefix))
            .filter(|(p, _)| !p[prefix.len()..].contains('/') && p.ends_with(".py"))
            .map(|(p, _)| p.clone())
            .collect()
    }

    /// The files an import statement in `file` brings in, and the external top-level
    /// module it names, if any.
    fn import(&self, file: &str, imp: &Import) -> (Vec<String>, Option<String>) {
        if imp.level == 0 {
            let mut files = Vec::new();
            match self.absolute(&imp.module) {
                Resolved::External(top) => return (files, Some(top)),
                Resolved::Local(found) => files.extend(found),
            }
            for name in &imp.names {
                if name == "*" {
                    for root in &self.roots {
                        files.extend(self.submodules(&join(root, &imp.module.replace('.', "/"))));
                    }
                } else if let Resolved::Local(found) =
                    self.absolute(&format!("{}.{name}", imp.module))
                {
                    files.extend(found);
                }
            }
            return (files, None);
        }
        let mut base = parent(file).to_string();
        for _ in 1..imp.level {
            base = parent(&base).to_string();
        }
        let mut files = Vec::new();
        let target = if imp.module.is_empty() {
            base.clone()
        } else {
            files.extend(self.under(&base, &imp.module).unwrap_or_default());
            join(&base, &imp.module.replace('.', "/"))
        };
        for name in &imp.names {
            if name == "*" {
                files.extend(self.submodules(&target));
            } else {
                files.extend(self.under(&target, name).unwrap_or_default());
            }
        }
        (files, None)
    }
}

/// The search path: see the module documentation.
fn search_roots(tree: &Tree, entry_files: &[String]) -> Vec<String> {
    let mut roots = vec![String::new()];
    let mut add = |r: String| {
        if !roots.contains(&r) {
            roots.push(r);
        }
    };
    for e in entry_files {
        add(parent(e).to_string());
    }
    if tree.has_dir("src") {
        add("src".into());
    }
    for m in &tree.markers {
        let d = parent(m).to_string();
        let src = join(&d, "src");
        if tree.has_dir(&src) {
            add(src);
        }
        add(d);
    }
    roots
}

/// The imports of one file, through the cache.
struct Parser<'a> {
    root: &'a Path,
    cache: BTreeMap<String, Cached>,
    used: BTreeSet<String>,
    dirty: bool,
}

#[derive(Clone, serde::Serialize, serde::Deserialize)]
struct Cached {
    imports: Vec<(String, u32, Vec<String>, bool, usize)>,
    dynamic: Vec<(usize, String)>,
    error: Option<String>,
}

impl Cached {
    fn of(result: &Result<FileImports, imports::ImportError>) -> Cached {
        match result {
            Ok(f) => Cached {
                imports: f
                    .imports
                    .iter()
                    .map(|i| {
                        (
                            i.module.clone(),
                            i.level,
                            i.names.clone(),
                            i.conditional,
                            i.line,
                        )
                    })
                    .collect(),
                dynamic: f.dynamic.clone(),
                error: None,
            },
            Err(e) => Cached {
                imports: Vec::new(),
                dynamic: Vec::new(),
                error: Some(e.to_string()),
            },
        }
    }

    fn imports(&self) -> Vec<Import> {
        self.imports
            .iter()
            .map(|(module, level, names, conditional, line)| Import {
                module: module.clone(),
                level: *level,
                names: names.clone(),
                conditional: *conditional,
                line: *line,
            })
            .collect()
    }
}

const CACHE_PREFIX: &str = "scope-imports-v1";
/// The last scope computed for a repository, with the key it was computed for.
const RESULT_PREFIX: &str = "scope-result-v2";

/// What a scope depends on besides the tree: the request, the stamped environments'
/// distributions and the recorded lockfiles.
fn put_inputs(put: &mut dyn FnMut(&str), req: &Request, inputs: &Inputs<'_>) {
    put(RESULT_PREFIX);
    for list in [&req.entry, &req.lockfiles, &req.reads] {
        put(&list.len().to_string());
        list.iter().for_each(|x| put(x));
    }
    for env in inputs.python {
        env.site_packages.iter().for_each(|s| put(s));
        for d in &env.distributions {
            put(&d.name);
            put(&d.version);
            d.requires.iter().for_each(|r| put(r));
        }
    }
    for l in inputs.lockfiles {
        put(&l.path);
        put(&l.sha256);
    }
}

/// Hex SHA-256 of the strings `fill` puts, each ended by a NUL byte.
fn key_of(fill: impl FnOnce(&mut dyn FnMut(&str))) -> String {
    use sha2::{Digest, Sha256};
    let mut h = Sha256::new();
    fill(&mut |s: &str| {
        h.update(s.as_bytes());
        h.update([0]);
    });
    crate::manifest::hex(&h.finalize())
}

/// What a scope depends on: the request, every Python file of the tree with its blob id, the
/// stamped environments' distributions and the recorded lockfiles. Equal keys give equal
/// scopes, so a warm stamp of an unchanged tree reads the last result instead of resolving.
fn result_key(req: &Request, tree: &Tree, inputs: &Inputs<'_>) -> Option<String> {
    // A file whose id is unknown (it could not be read) makes the key unusable.
    if tree.files.values().any(Option::is_none) {
        return None;
    }
    Some(key_of(|put| {
        put_inputs(put, req, inputs);
        for (path, blob) in &tree.files {
            put(path);
            put(blob.as_deref().unwrap_or_default());
        }
        tree.markers.iter().for_each(|m| put(m));
    }))
}

/// The same scope's key without building the tree: the git index's digest (equal bytes list
/// the same files with the same blob ids) and the changed Python files and markers with
/// their blob ids as on disk. A different index with the same Python files still finds the
/// result by [`result_key`], after building the tree.
fn quick_key(req: &Request, inputs: &Inputs<'_>, index_digest: &str) -> Option<String> {
    let mut changed: Vec<(&str, Option<String>)> = Vec::new();
    for path in inputs.changed {
        if is_python(path) {
            let on_disk = inputs.root.join(path);
            let blob = if on_disk.is_file() {
                let bytes = crate::limits::read_regular_file_nofollow(&on_disk).ok()?;
                Some(
                    git2::Oid::hash_object(git2::ObjectType::Blob, &bytes)
                        .ok()?
                        .to_string(),
                )
            } else {
                None
            };
            changed.push((path, blob));
        } else if PROJECT_MARKERS.contains(&file_name(path)) {
            changed.push((path, inputs.root.join(path).is_file().then(String::new)));
        }
    }
    changed.sort();
    Some(key_of(|put| {
        put_inputs(put, req, inputs);
        put(index_digest);
        for (path, blob) in &changed {
            put(path);
            put(blob.as_deref().unwrap_or("absent"));
        }
    }))
}

#[derive(serde::Serialize, serde::Deserialize)]
struct Remembered {
    key: String,
    /// [`quick_key`], when the tree came from a git index.
    #[serde(default)]
    quick: Option<String>,
    scope: Scope,
}

/// The last scope computed for the repository at `root`, from the cache folder `dir`.
fn read_remembered(dir: &Path, root: &Path) -> Option<Remembered> {
    let file = crate::cache::per_repository_file(dir, RESULT_PREFIX, root);
    let bytes = crate::cache::read_cache_file(&file).ok()?;
    serde_json::from_slice(&bytes).ok()
}

/// What a warm stamp reads for the scope while git's status is still running: the digest of
/// the git index and the last result with its manifest sections already rendered.
pub struct Ahead {
    root: std::path::PathBuf,
    index_digest: Option<String>,
    remembered: Option<Remembered>,
    rendered: Option<crate::manifest::RenderedScope>,
}

impl Ahead {
    /// Reads ahead for the work tree `root` with the git index `index`; `None` without a
    /// cache folder (nothing is remembered then).
    pub fn read(root: &Path, index: Option<&Path>, cache_dir: Option<&Path>) -> Option<Ahead> {
        use sha2::{Digest, Sha256};
        let dir = cache_dir?;
        let index_digest = index
            .and_then(|i| crate::limits::read_regular_file_nofollow(i).ok())
            .map(|bytes| crate::manifest::hex(&Sha256::digest(&bytes)));
        let remembered = read_remembered(dir, root);
        let rendered = remembered
            .as_ref()
            .and_then(|r| crate::manifest::RenderedScope::of(&r.scope));
        Some(Ahead {
            root: root.to_path_buf(),
            index_digest,
            remembered,
            rendered,
        })
    }
}

/// A computed scope, with its manifest sections when they were rendered ahead of time.
pub struct Collected {
    /// The scope.
    pub scope: Scope,
    /// Its sections as [`crate::manifest::Prepared::append_rendered_scope`] takes them.
    pub rendered: Option<crate::manifest::RenderedScope>,
}

impl Parser<'_> {
    /// Reads `path`: its blob id and its imports (or why they are unknown).
    fn read(&mut self, path: &str, blob: Option<&str>) -> Result<(String, Cached), String> {
        if let Some(id) = blob {
            if let Some(c) = self.cache.get(id) {
                self.used.insert(id.to_string());
                return Ok((id.to_string(), c.clone()));
            }
        }
        let bytes = crate::limits::read_regular_file_nofollow(&self.root.join(path))
            .map_err(|e| format!("{path}: cannot be read ({})", crate::limits::refusal(&e)))?;
        let id = match blob {
            Some(id) => id.to_string(),
            None => {
                let id = git2::Oid::hash_object(git2::ObjectType::Blob, &bytes)
                    .map_err(|e| format!("{path}: {e}"))?
                    .to_string();
                if let Some(c) = self.cache.get(&id) {
                    self.used.insert(id.clone());
                    return Ok((id, c.clone()));
                }
                id
            }
        };
        let text = String::from_utf8_lossy(&bytes);
        let parsed = if path.ends_with(".ipynb") {
            match imports::notebook_code(&text) {
                Some(code) => imports::parse(&code, path),
                None => Err(imports::ImportError {
                    path: path.to_string(),
                    line: 1,
                    message: "not a Jupyter notebook".into(),
                }),
            }
        } else {
            imports::parse(&text, path)
        };
        let cached = Cached::of(&parsed);
        self.cache.insert(id.clone(), cached.clone());
        self.used.insert(id.clone());
        self.dirty = true;
        Ok((id, cached))
    }
}

fn cache_file(dir: &Path, root: &Path) -> std::path::PathBuf {
    crate::cache::per_repository_file(dir, CACHE_PREFIX, root)
}

fn load_cache(dir: Option<&Path>, root: &Path) -> BTreeMap<String, Cached> {
    dir.and_then(|d| crate::cache::read_cache_file(&cache_file(d, root)).ok())
        .and_then(|bytes| serde_json::from_slice(&bytes).ok())
        .unwrap_or_default()
}

/// Computes the scope. Never fails: what cannot be known is written in `notes` and makes the
/// scope incomplete. `ahead` is what [`Ahead::read`] found for the same work tree.
pub fn collect(req: &Request, inputs: &Inputs<'_>, ahead: Option<Ahead>) -> Collected {
    let ahead = ahead.filter(|a| a.root == inputs.root);
    let quick = ahead.as_ref().and_then(|a| {
        inputs.index?;
        quick_key(req, inputs, a.index_digest.as_deref()?)
    });
    let (remembered, rendered) = match ahead {
        Some(a) => (a.remembered, a.rendered),
        None => (
            inputs
                .cache_dir
                .and_then(|d| read_remembered(d, inputs.root)),
            None,
        ),
    };
    // An unchanged index and unchanged changed files: the last result, nothing built.
    if let (Some(r), Some(q)) = (&remembered, &quick) {
        if r.quick.as_ref() == Some(q) {
            let scope = remembered.map(|r| r.scope).unwrap_or_default();
            return Collected { scope, rendered };
        }
    }
    let mut tree = inputs
        .index
        .and_then(|i| Tree::from_index(inputs.root, i, inputs.changed))
        .unwrap_or_else(|| Tree::walk(inputs.root));
    let key = inputs.cache_dir.and_then(|_| {
        tree.fill_blobs(inputs.root);
        result_key(req, &tree, inputs)
    });
    let result_file = inputs
        .cache_dir
        .map(|d| crate::cache::per_repository_file(d, RESULT_PREFIX, inputs.root));
    let (scope, rendered) = match remembered {
        Some(r) if key.as_ref() == Some(&r.key) => (r.scope, rendered),
        _ => (compute(req, inputs, &tree), None),
    };
    if let (Some(file), Some(key)) = (&result_file, key) {
        let remembered = Remembered { key, quick, scope };
        if let Ok(bytes) = serde_json::to_vec(&remembered) {
            crate::cache::write_cache_file(file, &bytes);
        }
        return Collected {
            scope: remembered.scope,
            rendered,
        };
    }
    Collected { scope, rendered }
}

/// Computes the scope of a tree (see [`collect`]).
fn compute(req: &Request, inputs: &Inputs<'_>, tree: &Tree) -> Scope {
    let mut notes = Vec::new();
    // Entry points: files, else modules.
    let mut entry_files = Vec::new();
    let mut entry_modules = Vec::new();
    for e in &req.entry {
        let rel = Path::new(e)
            .strip_prefix(inputs.root)
            .map(|p| p.to_string_lossy().replace('\\', "/"))
            .unwrap_or_else(|_| e.trim_start_matches("./").to_string());
        if tree.has_file(&rel) {
            entry_files.push(rel);
        } else if inputs.root.join(&rel).is_file() {
            notes.push(format!(
                "entry point `{e}` is not a Python file or notebook: what it imports cannot be read"
            ));
        } else if !e.contains('/') && !e.ends_with(".py") {
            entry_modules.push(e.clone());
        } else {
            notes.push(format!("entry point `{e}` was not found"));
        }
    }
    let resolver = Resolver {
        tree,
        roots: search_roots(tree, &entry_files),
    };
    let mut queue: VecDeque<String> = entry_files.iter().cloned().collect();
    for m in &entry_modules {
        match resolver.absolute(m) {
            Resolved::Local(files) if !files.is_empty() => {
                queue.extend(files.iter().cloned());
                // `python -m package` runs its `__main__.py`.
                if let Some(init) = files.iter().find(|f| f.ends_with("/__init__.py")) {
                    let main = format!("{}/__main__.py", parent(init));
                    if tree.has_file(&main) {
                        queue.push_back(main);
                    }
                }
            }
            _ => notes.push(format!(
                "entry point `{m}` is neither a file nor a module of the repository"
            )),
        }
    }
    let mut parser = Parser {
        root: inputs.root,
        cache: load_cache(inputs.cache_dir, inputs.root),
        used: BTreeSet::new(),
        dirty: false,
    };
    let mut files: BTreeMap<String, String> = BTreeMap::new();
    let mut modules = BTreeSet::new();
    let mut conditional = 0u64;
    while let Some(path) = queue.pop_front() {
        if files.contains_key(&path) {
            continue;
        }
        let blob = tree.files.get(&path).cloned().flatten();
        let (id, parsed) = match parser.read(&path, blob.as_deref()) {
            Ok(r) => r,
            Err(e) => {
                notes.push(e);
                continue;
            }
        };
        files.insert(path.clone(), id);
        if let Some(e) = &parsed.error {
            notes.push(e.clone());
        }
        for (line, what) in &parsed.dynamic {
            notes.push(format!("{path}:{line}: {what}"));
        }
        for imp in parsed.imports() {
            conditional += u64::from(imp.conditional);
            let (found, external) = resolver.import(&path, &imp);
            for f in found {
                if !files.contains_key(&f) {
                    queue.push_back(f);
                }
            }
            if let Some(top) = external {
                if !top.is_empty() && !crate::stdlib::contains(&top) && !top.starts_with('_') {
                    modules.insert(top);
                }
            }
        }
    }
    if let Some(dir) = inputs.cache_dir {
        if parser.dirty {
            let kept: BTreeMap<&String, &Cached> = parser
                .cache
                .iter()
                .filter(|(k, _)| parser.used.contains(*k))
                .collect();
            if let Ok(bytes) = serde_json::to_vec(&kept) {
                crate::cache::write_cache_file(&cache_file(dir, inputs.root), &bytes);
            }
        }
    }
    let complete = notes.is_empty();
    let lockfiles = lockfiles_in_scope(req, inputs.lockfiles);
    let packages = packages(&modules, inputs, &lockfiles, &mut notes);
    notes.sort();
    notes.dedup();
    Scope {
        entry: req.entry.clone(),
        lockfiles,
        reads: req.reads.clone(),
        complete,
        notes,
        conditional_imports: conditional,
        modules: modules.into_iter().collect(),
        packages,
        files,
    }
}

/// The recorded lockfiles the job installs from: those matching the declared globs, or every
/// Python lockfile (a Python job cannot import npm, Go or .NET packages).
fn lockfiles_in_scope(req: &Request, lockfiles: &[Lockfile]) -> Vec<String> {
    let globs = {
        let mut b = globset::GlobSetBuilder::new();
        for g in &req.lockfiles {
            if let Ok(glob) = globset::GlobBuilder::new(g).literal_separator(true).build() {
                b.add(glob);
            }
        }
        b.build().ok()
    };
    lockfiles
        .iter()
        .filter(|l| match &globs {
            Some(set) if !req.lockfiles.is_empty() => set.is_match(&l.path),
            _ => matches!(l.ecosystem.as_str(), "pypi" | "conda"),
        })
        .map(|l| l.path.clone())
        .collect()
}

/// Lockfile formats that record dependency edges.
fn records_edges(path: &str) -> bool {
    let name = file_name(path);
    matches!(name, "uv.lock" | "poetry.lock" | "pdm.lock" | "pylock.toml")
        || (name.starts_with("pylock.") && name.ends_with(".toml"))
}

/// The top-level modules of every distribution installed in the stamped environments, as
/// `importlib.metadata.packages_distributions` finds them: `top_level.txt` where the
/// distribution has one, else the first part of every path its `RECORD` lists (PyPA
/// "Recording installed projects"). Module → distributions.
fn installed_top_levels(python: &[PythonEnv]) -> BTreeMap<String, BTreeSet<String>> {
    let mut map: BTreeMap<String, BTreeSet<String>> = BTreeMap::new();
    let read = |p: &Path| {
        crate::limits::read_regular_file_nofollow(p)
            .ok()
            .map(|b| String::from_utf8_lossy(&b).into_owned())
    };
    for env in python {
        for site in &env.site_packages {
            let Ok(entries) = std::fs::read_dir(site) else {
                continue;
            };
            for entry in entries.flatten() {
                let name = entry.file_name().to_string_lossy().into_owned();
                let Some(stem) = name
                    .strip_suffix(".dist-info")
                    .or_else(|| name.strip_suffix(".egg-info"))
                else {
                    continue;
                };
                let dist = normalize_name(stem.split('-').next().unwrap_or(stem));
                let modules: BTreeSet<String> = match read(&entry.path().join("top_level.txt")) {
                    Some(text) => text
                        .lines()
                        .map(str::trim)
                        .filter(|l| !l.is_empty())
                        .map(str::to_string)
                        .collect(),
                    None => read(&entry.path().join("RECORD"))
                        .map(|record| {
                            crate::stack::python::record_paths(&record)
                                .filter_map(|p| {
                                    let first = p.split('/').next()?;
                                    let top =
                                        first.split_once('.').map_or(first, |(m, _)| m).to_string();
                                    let keep = !first.ends_with(".dist-info")
                                        && !first.ends_with(".data")
                                        && !first.starts_with("..")
                                        && first != "__pycache__"
                                        && (p.contains('/')
                                            || first.ends_with(".py")
                                            || first.ends_with(".so")
                                            || first.ends_with(".pyd"));
                                    keep.then_some(top)
                                })
                                .collect()
                        })
                        .unwrap_or_default(),
                };
                for module in modules {
                    map.entry(module).or_default().insert(dist.clone());
                }
            }
        }
    }
    map
}

/// Every package the job can load, or `None` (with a note) when it cannot be told.
fn packages(
    modules: &BTreeSet<String>,
    inputs: &Inputs<'_>,
    in_scope: &[String],
    notes: &mut Vec<String>,
) -> Option<Vec<String>> {
    // Known names and their edges (None: the edges are not recorded).
    let mut edges: BTreeMap<String, Option<BTreeSet<String>>> = BTreeMap::new();
    for env in inputs.python {
        for d in &env.distributions {
            edges
                .entry(d.name.clone())
                .or_insert_with(|| Some(BTreeSet::new()))
                .get_or_insert_with(BTreeSet::new)
                .extend(d.requires.iter().cloned());
        }
    }
    for l in inputs.lockfiles {
        if !in_scope.contains(&l.path) {
            continue;
        }
        let with_edges = records_edges(&l.path);
        for p in &l.packages {
            let e = edges.entry(normalize_name(&p.name)).or_insert(None);
            if with_edges {
                e.get_or_insert_with(BTreeSet::new)
                    .extend(p.requires.iter().map(|r| normalize_name(r)));
            }
        }
    }
    let top_levels = installed_top_levels(inputs.python);
    let mut start = BTreeSet::new();
    let mut unmapped = Vec::new();
    for m in modules {
        let mut found: BTreeSet<String> = BTreeSet::new();
        if let Some((_, dists)) = KNOWN_MODULES.iter().find(|(k, _)| k == m) {
            found.extend(
                dists
                    .iter()
                    .filter(|d| edges.contains_key(**d))
                    .map(|d| d.to_string()),
            );
        }
        if let Some(dists) = top_levels.get(m) {
            found.extend(dists.iter().filter(|d| edges.contains_key(*d)).cloned());
        }
        let own = normalize_name(m);
        if edges.contains_key(&own) {
            found.insert(own);
        }
        if found.is_empty() {
            unmapped.push(m.clone());
        }
        start.extend(found);
    }
    if !unmapped.is_empty() {
        // With a stamped interpreter, a module no installed distribution provides cannot be
        // imported there (a guarded import for another Python version or platform). Without
        // one, a locked distribution may provide it under another name.
        if inputs.python.is_empty() {
            notes.push(format!(
                "imported module(s) {} match no locked distribution (stamp with the interpreter, --python, to read what is installed), so the packages the job can load are not known",
                unmapped.join(", ")
            ));
            return None;
        }
        notes.push(format!(
            "imported module(s) {} are not installed in the stamped environment (imports guarded for another Python or platform)",
            unmapped.join(", ")
        ));
    }
    let mut reach = BTreeSet::new();
    let mut queue: VecDeque<String> = start.into_iter().collect();
    let mut blind = Vec::new();
    while let Some(d) = queue.pop_front() {
        if !reach.insert(d.clone()) {
            continue;
        }
        match edges.get(&d) {
            Some(Some(next)) => queue.extend(next.iter().cloned()),
            Some(None) => blind.push(d),
            // A dependency neither installed nor locked: nothing further to follow.
            None => {}
        }
    }
    if !blind.is_empty() {
        notes.push(format!(
            "the dependencies of {} are recorded nowhere (no interpreter stamped, and the lockfile lists no edges), so the packages the job can load are not known",
            blind.join(", ")
        ));
        return None;
    }
    Some(reach.into_iter().collect())
}

#[cfg(test)]
mod tests {
    use super::*;

    fn tree(paths: &[&str]) -> Tree {
        let mut t = Tree::new();
        for p in paths {
            t.add(p.to_string(), Some("0".into()));
        }
        t
    }

    #[test]
    fn resolution_follows_the_import_system() {
        let t = tree(&[
            "train.py",
            "kelp/__init__.py",
            "kelp/model.py",
            "kelp/data/__init__.py",
            "kelp/data/loader.py",
            "ns/part.py",
            "src/tide/__init__.py",
            "src/tide/util.py",
        ]);
        let r = Resolver {
            tree: &t,
            roots: search_roots(&t, &["train.py".to_string()]),
        };
        let files = |m: &str| match r.absolute(m) {
            Resolved::Local(f) => f,
            Resolved::External(top) => vec![format!("external {top}")],
        };
        assert_eq!(files("kelp.model"), ["kelp/__init__.py", "kelp/model.py"]);
        assert_eq!(
            files("kelp.data.loader"),
            [
                "kelp/__init__.py",
                "kelp/data/__init__.py",
                "kelp/data/loader.py"
            ]
        );
        // A namespace package (no __init__.py).
        assert_eq!(files("ns.part"), ["ns/part.py"]);
        // A src/ layout.
        assert_eq!(
            files("tide.util"),
            ["src/tide/__init__.py", "src/tide/util.py"]
        );
        assert_eq!(files("numpy.linalg"), ["external numpy"]);
        let rel = Import {
            module: String::new(),
            level: 1,
            names: vec!["loader".into()],
            conditional: false,
            line: 1,
        };
        assert_eq!(
            r.import("kelp/data/__init__.py", &rel).0,
            ["kelp/data/loader.py"]
        );
        let up = Import {
            module: "model".into(),
            level: 2,
            names: vec!["Net".into()],
            conditional: false,
            line: 1,
        };
        assert_eq!(r.import("kelp/data/loader.py", &up).0, ["kelp/model.py"]);
    }
}
