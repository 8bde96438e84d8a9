# Sourced by campaign.sh and replay.sh: the seed folders of each fuzz target (its regression
# corpus). A new target needs a line here.
seeds() { # target -> seed folders
  case "$1" in
    cargo_lock) echo tests/corpus/Cargo.lock ;;
    requirements_txt) echo tests/corpus/requirements.txt ;;
    package_lock_json) echo tests/corpus/package-lock.json ;;
    yarn_lock) echo tests/corpus/yarn.lock ;;
    pnpm_lock_yaml) echo tests/corpus/pnpm-lock.yaml ;;
    go_mod) echo tests/corpus/go.mod ;;
    go_sum) echo fuzz/seeds/go.sum ;;
    packages_lock_json) echo tests/corpus/packages.lock.json ;;
    renv_lock) echo tests/corpus/renv.lock ;;
    julia_manifest_toml) echo tests/corpus/Manifest.toml ;;
    pylock_toml) echo tests/corpus/pylock.toml ;;
    poetry_lock) echo tests/corpus/poetry.lock ;;
    pipfile_lock) echo tests/corpus/Pipfile.lock ;;
    uv_lock) echo tests/corpus/uv.lock ;;
    pdm_lock) echo tests/corpus/pdm.lock ;;
    conda_environment_yml) echo tests/corpus/environment.yml ;;
    conda_explicit) echo tests/corpus/spec-file.txt ;;
    dockerfile) echo tests/corpus/Dockerfile ;;
    pyproject_toml) echo tests/corpus/pyproject.toml ;;
    setup_cfg) echo tests/corpus/setup.cfg ;;
    requirements_in) echo tests/corpus/requirements.in ;;
    python_version) echo tests/corpus/.python-version ;;
    rust_toolchain_toml) echo tests/corpus/rust-toolchain.toml ;;
    nvmrc) echo tests/corpus/.nvmrc ;;
    conda_lock_yml) echo tests/corpus/conda-lock.yml ;;
    pixi_lock) echo tests/corpus/pixi.lock ;;
    manifest) echo tests/corpus/manifest tests/corpus/manifest-json fixtures/demo ;;
    policy) echo fuzz/seeds/policy ;;
    openblas_library) echo fuzz/seeds/openblas ;;
    *) echo "fuzz: no seeds listed for target $1 (fuzz/targets.sh)" >&2; return 1 ;;
  esac
}

# Every target, from fuzz/Cargo.toml.
all_targets() {
  sed -n 's/^name = "\([a-z_]*\)"$/\1/p' fuzz/Cargo.toml | grep -v '^runprint-fuzz$'
}
