//! The imports of one Python source file, read with a real Python parser (Ruff's
//! `ruff_python_parser`), never with regular expressions.
//!
//! What counts as an import follows the language reference ("The import statement"):
//!
//! * `import a.b.c` and `import a.b as x` import `a`, `a.b` and `a.b.c`;
//! * `from a.b import c` imports `a.b` and, when `a.b.c` is a module, `a.b.c` too;
//! * `from . import c` and `from ..x import y` are relative to the file's package (`level`
//!   dots);
//! * `importlib.import_module("a.b")` and `__import__("a.b")` with a string literal import
//!   `a.b`; with any other argument the module cannot be known statically, and the file is
//!   marked dynamic.
//!
//! Imports anywhere in the file count, also inside functions, classes, `if`, `try` and loops
//! (conservatively: the code may run). Those not at the top level of the module are counted
//! as conditional.

use ruff_python_ast::visitor::{self, Visitor};
use ruff_python_ast::{Expr, Stmt};
use ruff_text_size::Ranged;

/// One import found in a file.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Import {
    /// The module as written, without leading dots (`a.b`; empty for `from . import c`).
    pub module: String,
    /// Number of leading dots (0 for an absolute import).
    pub level: u32,
    /// For `from … import names`: the imported names (`*` for a star import).
    pub names: Vec<String>,
    /// Not at the top level of the module (inside a function, class, `if`, `try`...).
    pub conditional: bool,
    /// 1-based line.
    pub line: usize,
}

/// What a file imports.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct FileImports {
    /// Every import, in source order.
    pub imports: Vec<Import>,
    /// Imports whose module cannot be known statically: (line, what), e.g.
    /// `importlib.import_module` with a computed name.
    pub dynamic: Vec<(usize, String)>,
}

/// A file that is not valid Python.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
#[error("{path}:{line}: not valid Python: {message}")]
pub struct ImportError {
    /// The file.
    pub path: String,
    /// 1-based line.
    pub line: usize,
    /// The parser's message.
    pub message: String,
}

fn line_at(text: &str, offset: usize) -> usize {
    text.as_bytes()[..offset.min(text.len())]
        .iter()
        .filter(|&&b| b == b'\n')
        .count()
        + 1
}

struct Finder<'t> {
    text: &'t str,
    depth: usize,
    out: FileImports,
}

impl Finder<'_> {
    fn line(&self, offset: ruff_text_size::TextSize) -> usize {
        line_at(self.text, offset.to_usize())
    }
}

/// `importlib.import_module`, `import_module` and `__import__`.
fn is_import_call(func: &Expr) -> bool {
    match func {
        Expr::Name(n) => matches!(n.id.as_str(), "import_module" | "__import__"),
        Expr::Attribute(a) => {
            a.attr.as_str() == "import_module"
                && matches!(&*a.value, Expr::Name(n) if n.id.as_str() == "importlib")
        }
        _ => false,
    }
}

impl<'a> Visitor<'a> for Finder<'_> {
    fn visit_stmt(&mut self, stmt: &'a Stmt) {
        let conditional = self.depth > 0;
        match stmt {
            Stmt::Import(i) => {
                for alias in &i.names {
                    self.out.imports.push(Import {
                        module: alias.name.to_string(),
                        level: 0,
                        names: Vec::new(),
                        conditional,
                        line: self.line(i.range().start()),
                    });
                }
            }
            Stmt::ImportFrom(f) => {
                self.out.imports.push(Import {
                    module: f.module.as_ref().map_or(String::new(), |m| m.to_string()),
                    level: f.level,
                    names: f.names.iter().map(|a| a.name.to_string()).collect(),
                    conditional,
                    line: self.line(f.range().start()),
                });
            }
            _ => {}
        }
        let compound = !matches!(
            stmt,
            Stmt::Import(_) | Stmt::ImportFrom(_) | Stmt::Expr(_) | Stmt::Assign(_)
        );
        if compound {
            self.depth += 1;
        }
        visitor::walk_stmt(self, stmt);
        if compound {
            self.depth -= 1;
        }
    }

    fn visit_expr(&mut self, expr: &'a Expr) {
        if let Expr::Call(call) = expr {
            if is_import_call(&call.func) {
                let line = self.line(call.range().start());
                match call.arguments.args.first() {
                    Some(Expr::StringLiteral(s)) => {
                        let name = s.value.to_str();
                        let level = name.chars().take_while(|&c| c == '.').count() as u32;
                        self.out.imports.push(Import {
                            module: name.trim_start_matches('.').to_string(),
                            level,
                            names: Vec::new(),
                            conditional: true,
                            line,
                        });
                    }
                    _ => self.out.dynamic.push((
                        line,
                        "a module imported by a name computed at run time".to_string(),
                    )),
                }
            }
        }
        visitor::walk_expr(self, expr);
    }
}

/// Reads the imports of a Python file's text; `path` only names the file in errors.
pub fn parse(text: &str, path: &str) -> Result<FileImports, ImportError> {
    let parsed = ruff_python_parser::parse_module(text).map_err(|e| ImportError {
        path: path.to_string(),
        line: line_at(text, e.location.start().to_usize()),
        message: e.error.to_string(),
    })?;
    let mut finder = Finder {
        text,
        depth: 0,
        out: FileImports::default(),
    };
    for stmt in parsed.suite() {
        finder.visit_stmt(stmt);
    }
    Ok(finder.out)
}

/// The code of a Jupyter notebook (nbformat 4: `cells[].source` of code cells, a string or a
/// list of lines), with IPython magics and shell escapes (`%`, `!`) blanked so that the rest
/// parses as Python. `None` when the text is not a notebook.
pub fn notebook_code(text: &str) -> Option<String> {
    let v: serde_json::Value = serde_json::from_str(text).ok()?;
    let mut code = String::new();
    for cell in v.get("cells")?.as_array()? {
        if cell.get("cell_type").and_then(|t| t.as_str()) != Some("code") {
            continue;
        }
        let source = match cell.get("source") {
            Some(serde_json::Value::String(s)) => s.clone(),
            Some(serde_json::Value::Array(lines)) => {
                lines.iter().filter_map(|l| l.as_str()).collect::<String>()
            }
            _ => continue,
        };
        for line in source.lines() {
            let t = line.trim_start();
            if t.starts_with('%') || t.starts_with('!') {
                code.push('\n');
            } else {
                code.push_str(line);
                code.push('\n');
            }
        }
    }
    Some(code)
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The forms of the language reference, "The import statement" (7.11).
    #[test]
    fn every_form_of_the_import_statement() {
        let text = "import a.b.c\nimport d as e, f\nfrom g.h import i, j as k\nfrom . import l\n\
                    from ..m import n\nfrom o import *\n\ndef run():\n    import p\n\
                    try:\n    import q\nexcept ImportError:\n    q = None\n\
                    import importlib\nmod = importlib.import_module('r.s')\n\
                    other = importlib.import_module(name)\n__import__('t')\n";
        let f = parse(text, "x.py").unwrap();
        let got: Vec<(String, u32, bool)> = f
            .imports
            .iter()
            .map(|i| (i.module.clone(), i.level, i.conditional))
            .collect();
        let want = [
            ("a.b.c", 0, false),
            ("d", 0, false),
            ("f", 0, false),
            ("g.h", 0, false),
            ("", 1, false),
            ("m", 2, false),
            ("o", 0, false),
            ("p", 0, true),
            ("q", 0, true),
            ("importlib", 0, false),
            ("r.s", 0, true),
            ("t", 0, true),
        ];
        let want: Vec<(String, u32, bool)> = want
            .iter()
            .map(|(m, l, c)| (m.to_string(), *l, *c))
            .collect();
        assert_eq!(got, want);
        assert_eq!(f.imports[3].names, ["i", "j"]);
        assert_eq!(f.imports[6].names, ["*"]);
        assert_eq!(f.dynamic.len(), 1);
        assert_eq!(f.dynamic[0].0, 16);
    }

    #[test]
    fn syntax_errors_name_file_and_line() {
        let e = parse("import a\n\ndef (:\n", "pkg/bad.py").unwrap_err();
        assert_eq!(e.line, 3);
        assert!(e.to_string().starts_with("pkg/bad.py:3: not valid Python"));
    }

    #[test]
    fn notebooks_give_their_code_cells() {
        // nbformat 4 layout (nbformat documentation, "The Notebook file format").
        let nb = r#"{"cells": [
            {"cell_type": "markdown", "source": ["import nothing\n"]},
            {"cell_type": "code", "source": ["%matplotlib inline\n", "import kelp.model\n"]},
            {"cell_type": "code", "source": "!pip install x\nfrom kelp import data"}
        ], "nbformat": 4, "nbformat_minor": 5}"#;
        let code = notebook_code(nb).unwrap();
        let f = parse(&code, "n.ipynb").unwrap();
        let mods: Vec<&str> = f.imports.iter().map(|i| i.module.as_str()).collect();
        assert_eq!(mods, ["kelp.model", "kelp"]);
        assert_eq!(notebook_code("not json"), None);
    }
}
