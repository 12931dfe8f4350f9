//! The command line: `run`, `check`, `plan`, `stages`, `report`, `slurm`, `status`.
//!
//! The outermost layer: it parses arguments, calls phase one, the graph, the
//! scheduler and the writers, prints to the terminal and picks the exit code.
//! Everything is generic over the stage catalog so benchmarks can bring their own.

use crate::cache::{Cache, LastNode, NodeIndex};
use crate::exit::Exit;
use crate::graph::{self, Graph, NodeInput};
use crate::plan::{self, Plan};
use crate::record::{NodeStatus, RunRecord};
use crate::scheduler::{self, Progress, RunOptions};
use crate::{outputs, provenance, timefmt};
use clap::{Parser, Subcommand};
use stages::stage::Stage;
use std::collections::HashMap;
use std::io::IsTerminal;
use std::path::{Path, PathBuf};

#[derive(Parser, Debug)]
#[command(
    name = "retort",
    version,
    about = "Reproducible analysis recipes for materials characterization data"
)]
pub struct Cli {
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Subcommand, Debug)]
pub enum Command {
    /// Run a recipe: every step, in parallel, reusing cached results.
    Run(RunArgs),
    /// Check a recipe (names, options, inputs, files); run nothing.
    Check(RecipeArgs),
    /// Show every node of the recipe's graph: cached or to run, and why.
    Plan(RecipeArgs),
    /// Run only what the recipe's checks need and judge the checks (exit 3 on a failed check).
    Verify {
        #[command(flatten)]
        recipe: RecipeArgs,
        /// Steps run at once (default: all cores).
        #[arg(long, value_name = "N")]
        jobs: Option<usize>,
    },
    /// Pack the recipe, its includes, its data and its latest results into a zip with RO-Crate metadata.
    Bundle {
        #[command(flatten)]
        recipe: RecipeArgs,
        /// The zip file to write.
        #[arg(short = 'o', long = "output", value_name = "FILE.zip")]
        output: PathBuf,
        /// The run's output folder (default: out/ beside the recipe).
        #[arg(long, value_name = "DIR")]
        out: Option<PathBuf>,
        /// Leave the input data out; record only their paths, sizes and blake3 hashes.
        #[arg(long)]
        no_data: bool,
        /// License of the bundle, as a URL (for example an SPDX license page).
        #[arg(long, value_name = "URL")]
        license: Option<String>,
    },
    /// Pin stage versions, input-file hashes and included recipes in NAME.lock beside the recipe.
    Lock(RecipeArgs),
    /// Shrink the cache: keep what the recipe uses as it stands and the last result of
    /// every node any run in this cache made; remove the rest. Run it when no other
    /// run or pending shard uses the cache.
    Prune(RecipeArgs),
    /// The stage catalog: options, units, defaults, method sources.
    Stages {
        /// One stage in detail.
        name: Option<String>,
        /// As JSON.
        #[arg(long)]
        json: bool,
        /// The whole catalog as Markdown (docs/stages.md).
        #[arg(long, conflicts_with_all = ["json", "methods"])]
        markdown: bool,
        /// Every method with its published sources, as Markdown (docs/methods.md).
        #[arg(long, conflicts_with = "json")]
        methods: bool,
    },
    /// Write a commented starter recipe for a technique (list them without TECHNIQUE).
    New {
        /// uvvis, xps, nmr, eds, xrd, particles, afm, ediff.
        technique: Option<String>,
        /// Write to this file instead of standard output.
        #[arg(short = 'o', long = "output", value_name = "FILE")]
        output: Option<PathBuf>,
        /// Replace the file if it exists.
        #[arg(long)]
        force: bool,
    },
    /// Print the JSON Schema (draft 2020-12) of the recipe format, for editors.
    Schema,
    /// Write (and with --submit, submit) Slurm batch scripts: a job array of shards
    /// and a gather-and-report job that waits for it.
    Slurm(crate::slurm::SlurmArgs),
    /// Progress of a recipe across shards: nodes done, failed, pending.
    Status(crate::status::StatusArgs),
    /// Re-render the report of a finished run from its run.json and the cache.
    Report {
        /// The output folder of a run.
        outdir: PathBuf,
    },
}

#[derive(clap::Args, Debug, Clone)]
pub struct RecipeArgs {
    /// The recipe file.
    pub recipe: PathBuf,
    /// Override a parameter (repeatable).
    #[arg(long = "set", value_name = "NAME=VALUE")]
    pub set: Vec<String>,
    /// Allow reading files outside the recipe's folder.
    #[arg(long)]
    pub allow_outside: bool,
    /// Cache folder (default: $RETORT_CACHE, else .retort/ beside the recipe).
    #[arg(long, value_name = "DIR")]
    pub cache: Option<PathBuf>,
}

#[derive(clap::Args, Debug, Clone)]
pub struct RunArgs {
    #[command(flatten)]
    pub recipe: RecipeArgs,
    /// Output folder (default: out/ beside the recipe).
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
    /// Steps run at once (default: all cores).
    #[arg(long, value_name = "N")]
    pub jobs: Option<usize>,
    /// Stop starting new steps at the first failure.
    #[arg(long)]
    pub fail_fast: bool,
    /// Ignore the cache: run everything, in a throwaway cache.
    #[arg(long)]
    pub no_cache: bool,
    /// Print only errors.
    #[arg(long)]
    pub quiet: bool,
    /// Refuse to run (exit 2) when the recipe's lock file disagrees or is missing.
    #[arg(long)]
    pub locked: bool,
    /// Run only shard K of N of the fan-out (and what it needs) into the cache; no
    /// report. A plain run afterwards gathers and reports.
    #[arg(long, value_name = "K/N")]
    pub shard: Option<crate::shard::ShardSpec>,
    /// Write the output folder again even when it is up to date (by default a run
    /// whose every node is cached and whose outputs are already in place, unchanged,
    /// leaves them as they are).
    #[arg(long)]
    pub rewrite: bool,
}

/// Parses `args` and runs the command with `catalog`; returns the exit code.
pub fn main_with(args: Vec<String>, catalog: &[&'static dyn Stage]) -> Exit {
    let cli = match Cli::try_parse_from(args) {
        Ok(c) => c,
        Err(e) => {
            let _ = e.print();
            return if e.use_stderr() {
                Exit::Usage
            } else {
                Exit::Ok
            };
        }
    };
    match cli.command {
        Command::Run(a) => run(&a, catalog),
        Command::Check(a) => check(&a, catalog),
        Command::Plan(a) => plan_cmd(&a, catalog),
        Command::Verify { recipe, jobs } => crate::verify::command(&recipe, jobs, catalog),
        Command::Lock(a) => crate::lock::command(&a, catalog),
        Command::Prune(a) => prune(&a, catalog),
        Command::Bundle {
            recipe,
            output,
            out,
            no_data,
            license,
        } => crate::bundle::command(
            &recipe,
            &output,
            out.as_deref(),
            no_data,
            license.as_deref(),
            catalog,
        ),
        Command::Stages { markdown: true, .. } => {
            print!("{}", crate::catalog_md::stages_markdown(catalog));
            Exit::Ok
        }
        Command::Stages { methods: true, .. } => {
            print!("{}", crate::catalog_md::methods_markdown(catalog));
            Exit::Ok
        }
        Command::Stages { name, json, .. } => stages_cmd(name.as_deref(), json, catalog),
        Command::Schema => crate::schema::command(catalog),
        Command::New {
            technique,
            output,
            force,
        } => crate::scaffold::command(technique.as_deref(), output.as_deref(), force),
        Command::Slurm(a) => crate::slurm::command(&a, catalog),
        Command::Status(a) => crate::status::command(&a, catalog),
        Command::Report { outdir } => report_cmd(&outdir),
    }
}

pub(crate) fn phase1(a: &RecipeArgs, catalog: &[&'static dyn Stage]) -> Result<Plan, Exit> {
    let p1 = plan::build(&a.recipe, &a.set, a.allow_outside, catalog);
    let text = p1.render_diagnostics();
    if !text.is_empty() {
        eprint!("{text}");
    }
    p1.plan.ok_or(Exit::Usage)
}

pub(crate) fn cache_dir(a: &RecipeArgs, plan: &Plan) -> PathBuf {
    a.cache
        .clone()
        .or_else(|| {
            std::env::var_os("RETORT_CACHE")
                .filter(|v| !v.is_empty())
                .map(PathBuf::from)
        })
        .unwrap_or_else(|| plan.policy.root.join(".retort"))
}

pub(crate) fn host() -> String {
    hostname::get()
        .map(|h| h.to_string_lossy().to_string())
        .unwrap_or_else(|_| "unknown".into())
}

/// Identity of a node across runs, for the last-key index.
fn identity(plan: &Plan, graph: &Graph, n: usize) -> String {
    let node = &graph.nodes[n];
    format!(
        "{}\0{}\0{}",
        plan.policy
            .root
            .join(plan.recipes.first().map(|r| r.shown.as_str()).unwrap_or(""))
            .display(),
        plan.steps[node.step].id,
        node.item.as_deref().unwrap_or("")
    )
}

fn options_hash(v: &serde_json::Value) -> String {
    blake3::hash(v.to_string().as_bytes()).to_hex().to_string()
}

fn input_keys(graph: &Graph, n: usize) -> Vec<String> {
    let mut out = Vec::new();
    for inp in &graph.nodes[n].inputs {
        match inp {
            NodeInput::Missing => out.push(String::new()),
            NodeInput::One(r) => out.push(graph.ref_key(*r).to_string()),
            NodeInput::Many(v) => out.extend(v.iter().map(|(_, r)| graph.ref_key(*r).to_string())),
        }
    }
    out
}

fn last_node(plan: &Plan, graph: &Graph, n: usize) -> LastNode {
    let node = &graph.nodes[n];
    let step = &plan.steps[node.step];
    LastNode {
        key: node.key.clone(),
        stage_version: step.stage.info().version,
        options: options_hash(&step.options),
        files: node
            .files
            .iter()
            .map(|&f| (graph.files[f].shown.clone(), graph.files[f].hash.clone()))
            .collect(),
        inputs: input_keys(graph, n),
    }
}

pub(crate) fn expand(plan: &Plan, cache: &Cache) -> Result<Graph, String> {
    let mut idx = cache.stat_index();
    let g = graph::expand(plan, &mut idx)?;
    if g.hashed > 0 {
        cache.save_stat_index(&idx)?;
    }
    Ok(g)
}

pub(crate) struct Reporter {
    pub(crate) bar: Option<indicatif::ProgressBar>,
    pub(crate) plain: bool,
}

impl Progress for Reporter {
    fn finished(&self, label: &str, status: &NodeStatus, ms: f64) {
        let line = match status {
            NodeStatus::Ran => format!("ran      {label} ({ms:.1} ms)"),
            NodeStatus::Cached => format!("cached   {label}"),
            NodeStatus::Failed { error } => format!("FAILED   {label}: {error}"),
            NodeStatus::Skipped { because } => format!("skipped  {label}: {because}"),
        };
        if let Some(b) = &self.bar {
            b.inc(1);
            if matches!(status, NodeStatus::Failed { .. }) {
                b.println(line);
            }
        } else if self.plain || matches!(status, NodeStatus::Failed { .. }) {
            eprintln!("{line}");
        }
    }
}

fn run(a: &RunArgs, catalog: &[&'static dyn Stage]) -> Exit {
    let plan = match phase1(&a.recipe, catalog) {
        Ok(p) => p,
        Err(e) => return e,
    };
    match run_plan(a, &plan) {
        Ok(e) => e,
        Err(msg) => {
            eprintln!("error: {msg}");
            Exit::StepFailed
        }
    }
}

/// `--jobs`, else every core.
pub(crate) fn jobs_or_cores(jobs: Option<usize>) -> usize {
    jobs.unwrap_or_else(|| {
        std::thread::available_parallelism()
            .map(|n| n.get())
            .unwrap_or(1)
    })
    .max(1)
}

/// Prints how long each phase took when `RETORT_TIMING` is set (for benchmarking).
struct Phases {
    on: bool,
    last: std::time::Instant,
}

impl Phases {
    fn new() -> Self {
        Phases {
            on: std::env::var_os("RETORT_TIMING").is_some(),
            last: std::time::Instant::now(),
        }
    }
    fn mark(&mut self, what: &str) {
        if self.on {
            // Resident memory now and at its peak so far (Linux), to tell which
            // phase holds memory.
            let status = std::fs::read_to_string("/proc/self/status").unwrap_or_default();
            let field = |name: &str| {
                status
                    .lines()
                    .find_map(|l| l.strip_prefix(name))
                    .map(|v| v.trim().to_string())
                    .unwrap_or_default()
            };
            eprintln!(
                "timing: {what:<12} {:8.1} ms  (rss {}, peak {})",
                self.last.elapsed().as_secs_f64() * 1000.0,
                field("VmRSS:"),
                field("VmHWM:")
            );
        }
        self.last = std::time::Instant::now();
    }
}

fn run_plan(a: &RunArgs, plan: &Plan) -> Result<Exit, String> {
    let mut phases = Phases::new();
    let started = timefmt::now_rfc3339();
    let throwaway = if a.no_cache {
        Some(tempfile::tempdir().map_err(|e| e.to_string())?)
    } else {
        None
    };
    let dir = match &throwaway {
        Some(t) => t.path().to_path_buf(),
        None => cache_dir(&a.recipe, plan),
    };
    let out = a
        .out
        .clone()
        .unwrap_or_else(|| plan.policy.root.join("out"));
    if a.shard.is_some() {
        // A shard writes only into the cache, for a later run to gather.
        if a.no_cache {
            eprintln!("error: --shard leaves its work in the cache for a final run; it cannot be combined with --no-cache");
            return Ok(Exit::Usage);
        }
    } else if let Err(e) = outputs::check_target(&out, &plan.policy.root, &dir) {
        eprintln!("error: {e}");
        return Ok(Exit::Usage);
    }
    let cache = Cache::open(&dir, throwaway.is_none())?;
    let graph = expand(plan, &cache)?;
    if let Some(exit) = crate::lock::enforce(&a.recipe.recipe, plan, &graph, a.locked) {
        return Ok(exit);
    }
    phases.mark("graph");
    if a.shard.is_none() && !a.no_cache && !a.rewrite {
        if let Some(exit) = outputs_up_to_date(plan, &graph, &cache, &out, a.quiet) {
            phases.mark("up-to-date");
            return Ok(exit);
        }
    }
    let host = host();
    let jobs = jobs_or_cores(a.jobs);
    let terminal = std::io::stderr().is_terminal();
    let bar = (!a.quiet && terminal).then(|| {
        let b = indicatif::ProgressBar::new(
            graph.nodes.iter().filter(|n| n.same_as.is_none()).count() as u64,
        );
        if let Ok(style) =
            indicatif::ProgressStyle::with_template("{bar:30} {pos}/{len} nodes {elapsed}")
        {
            b.set_style(style);
        }
        b
    });
    let reporter = Reporter {
        bar,
        plain: !a.quiet && !terminal,
    };
    let opts = RunOptions {
        jobs,
        fail_fast: a.fail_fast,
        host: host.clone(),
    };
    if let Some(spec) = a.shard {
        let exit = crate::shard::run_shard(plan, &graph, &cache, &opts, &reporter, spec, a.quiet);
        if let Some(b) = &reporter.bar {
            b.finish_and_clear();
        }
        return exit;
    }
    // A node whose head was read but whose whole artifact turns out damaged when the
    // report draws it has been dropped from the cache: run again (once) to
    // recompute it, and say so.
    let mut reread: HashMap<String, String> = HashMap::new();
    let previous = outputs::read_manifest(&out);
    let (outcomes, record, tmp, rendered) = loop {
        let outcomes = scheduler::run(plan, &graph, &cache, &opts, &reporter);
        cache.flush()?;
        let mut outcomes = outcomes?;
        if let Some(b) = &reporter.bar {
            b.finish_and_clear();
        }
        for (o, node) in outcomes.iter_mut().zip(&graph.nodes) {
            if o.corrupt.is_none() && matches!(o.status, NodeStatus::Ran) {
                o.corrupt = reread.get(&node.key).cloned();
            }
        }
        release_freed_memory();
        phases.mark("scheduler");
        let checks = outputs::checks(plan, &graph, &outcomes);
        let finished = timefmt::now_rfc3339();
        let record = outputs::run_record(
            plan,
            &graph,
            &outcomes,
            checks,
            started.clone(),
            finished,
            &host,
            &cache.dir,
        );
        let results = outputs::Results {
            plan,
            graph: &graph,
            outcomes: &outcomes,
        };
        let tmp = outputs::temp_beside(&out)?;
        outputs::write_json(tmp.path(), "results.json", &results)?;
        outputs::write(
            tmp.path(),
            "tables/results.csv",
            &outputs::results_csv(&results)?,
        )?;
        let prov = provenance::Document {
            plan,
            graph: &graph,
            outcomes: &outcomes,
            host: &host,
        };
        outputs::write_json(tmp.path(), "provenance.json", &prov)?;
        phases.mark("provenance");
        outputs::write_json(tmp.path(), "run.json", &record)?;
        phases.mark("outputs");
        let source = CacheArtifacts::new(&cache);
        // The report draws on as many threads as the steps ran on (`--jobs`).
        let render = || {
            crate::report::render_reusing(
                &record,
                &source,
                tmp.path(),
                None,
                previous.as_ref().map(|m| (out.as_path(), &m.figures)),
            )
        };
        let rendered = match rayon::ThreadPoolBuilder::new().num_threads(jobs).build() {
            Ok(pool) => pool.install(render),
            Err(_) => render(),
        }
        .map_err(|e| e.to_string())?;
        phases.mark("report");
        let damaged = source.damaged();
        if damaged.is_empty() || !reread.is_empty() {
            break (outcomes, record, tmp, rendered);
        }
        reread = damaged;
    };
    let exit = run_exit(&record);
    let mut messages = Vec::new();
    for c in record.checks.iter().filter(|c| !c.passed) {
        messages.push(format!(
            "check failed: {}{}: {}",
            c.result,
            c.item
                .as_ref()
                .map(|i| format!(" [{i}]"))
                .unwrap_or_default(),
            c.message
        ));
    }
    let manifest = outputs::Manifest {
        schema_version: outputs::MANIFEST_SCHEMA_VERSION,
        digest: outputs::run_digest(plan, &graph),
        written: record.finished.clone(),
        exit: exit.code(),
        messages: messages.clone(),
        files: outputs::list_files(tmp.path())?,
        figures: rendered.figure_files,
    };
    outputs::write_json(tmp.path(), "manifest.json", &manifest)?;
    outputs::publish(tmp, &out)?;
    // Remember what each node was, for `plan`'s reasons.
    if throwaway.is_none() {
        let mut updates = NodeIndex::new();
        for (i, o) in outcomes.iter().enumerate() {
            if matches!(o.status, NodeStatus::Ran | NodeStatus::Cached) {
                updates.insert(identity(plan, &graph, i), last_node(plan, &graph, i));
            }
        }
        cache.update_node_index(updates)?;
    }
    phases.mark("publish");
    let count = |f: fn(&NodeStatus) -> bool| record.nodes.iter().filter(|n| f(&n.status)).count();
    let ran = count(|s| matches!(s, NodeStatus::Ran));
    let cached = count(|s| matches!(s, NodeStatus::Cached));
    let failed = count(|s| matches!(s, NodeStatus::Failed { .. }));
    let skipped = count(|s| matches!(s, NodeStatus::Skipped { .. }));
    let corrupt = outcomes.iter().filter(|o| o.corrupt.is_some()).count();
    let checks_failed = record.checks.iter().filter(|c| !c.passed).count();
    for (o, i) in outcomes.iter().zip(0..) {
        if let Some(reason) = &o.corrupt {
            if graph.nodes[i].same_as.is_none() {
                eprintln!(
                    "warning: cache entry of {} was corrupt ({reason}); recomputed",
                    scheduler::node_label(plan, &graph, i)
                );
            }
        }
    }
    for m in &messages {
        eprintln!("{m}");
    }
    if !a.quiet {
        println!(
            "{} nodes: {ran} ran, {cached} cached, {failed} failed, {skipped} skipped{}; {} checks, {checks_failed} failed; output in {}",
            record.nodes.len(),
            if corrupt > 0 { format!(", {corrupt} corrupt cache entries recomputed") } else { String::new() },
            record.checks.len(),
            out.display()
        );
    }
    Ok(exit)
}

/// Hands memory the worker threads freed back to the system before the report
/// starts: glibc keeps freed per-thread arena pages otherwise (measured: a cold
/// 10,000-spectrum run held ~200 MB after its scheduler that nothing used).
fn release_freed_memory() {
    #[cfg(all(target_os = "linux", target_env = "gnu"))]
    {
        extern "C" {
            fn malloc_trim(pad: usize) -> i32;
        }
        // SAFETY: malloc_trim takes no pointers and only returns free heap pages to
        // the kernel; glibc allows calling it at any time from any thread.
        unsafe {
            malloc_trim(0);
        }
    }
}

fn prune(a: &RecipeArgs, catalog: &[&'static dyn Stage]) -> Exit {
    let plan = match phase1(a, catalog) {
        Ok(p) => p,
        Err(e) => return e,
    };
    let done = (|| -> Result<crate::cache::Pruned, String> {
        let cache = Cache::open(&cache_dir(a, &plan), true)?;
        let graph = expand(&plan, &cache)?;
        let mut keep: std::collections::HashSet<String> =
            graph.nodes.iter().map(|n| n.key.clone()).collect();
        keep.extend(cache.node_index().into_values().map(|n| n.key));
        cache.prune(&keep)
    })();
    match done {
        Ok(p) => {
            let mb = |b: u64| b as f64 / 1e6;
            println!(
                "kept {} entries, removed {}; the cache went from {:.1} MB to {:.1} MB",
                p.kept,
                p.removed,
                mb(p.bytes_before),
                mb(p.bytes_after)
            );
            Exit::Ok
        }
        Err(e) => {
            eprintln!("error: {e}");
            Exit::StepFailed
        }
    }
}

/// The exit code a finished run ends with.
fn run_exit(record: &crate::record::RunRecord) -> Exit {
    if record.nodes.iter().any(|n| {
        matches!(
            n.status,
            NodeStatus::Failed { .. } | NodeStatus::Skipped { .. }
        )
    }) {
        Exit::StepFailed
    } else if record.checks.iter().any(|c| !c.passed) {
        Exit::CheckFailed
    } else {
        Exit::Ok
    }
}

/// When every node is in the cache and `out` already holds what this run would
/// write (its manifest has the same digest and its files are intact), says so,
/// repeats what that run printed, and gives its exit code.
fn outputs_up_to_date(
    plan: &Plan,
    graph: &crate::graph::Graph,
    cache: &Cache,
    out: &std::path::Path,
    quiet: bool,
) -> Option<Exit> {
    if !graph.nodes.iter().all(|n| cache.contains(&n.key)) {
        return None;
    }
    let m = outputs::up_to_date(out, &outputs::run_digest(plan, graph))?;
    for line in &m.messages {
        eprintln!("{line}");
    }
    if !quiet {
        println!(
            "{} nodes, all cached: the output in {} is up to date (written {}); --rewrite writes it again",
            graph.nodes.len(),
            out.display(),
            m.written
        );
    }
    Some(match m.exit {
        0 => Exit::Ok,
        3 => Exit::CheckFailed,
        _ => Exit::StepFailed,
    })
}

/// The report's view of the cache: heads for tables, whole artifacts for figures;
/// it remembers the entries it found damaged (the cache has dropped them).
pub(crate) struct CacheArtifacts<'a> {
    cache: &'a Cache,
    damaged: std::sync::Mutex<HashMap<String, String>>,
}

impl<'a> CacheArtifacts<'a> {
    pub(crate) fn new(cache: &'a Cache) -> Self {
        CacheArtifacts {
            cache,
            damaged: Default::default(),
        }
    }
    /// Keys found damaged, with the reason.
    pub(crate) fn damaged(&self) -> HashMap<String, String> {
        self.damaged.lock().map(|d| d.clone()).unwrap_or_default()
    }
    fn answer(&self, key: &str, found: crate::cache::Lookup) -> Option<stages::Artifact> {
        match found {
            crate::cache::Lookup::Found(b) => Some(b.1),
            crate::cache::Lookup::Corrupt(reason) => {
                if let Ok(mut d) = self.damaged.lock() {
                    d.insert(key.to_string(), reason);
                }
                None
            }
            crate::cache::Lookup::Missing => None,
        }
    }
}

impl crate::record::ArtifactSource for CacheArtifacts<'_> {
    fn load(&self, key: &str) -> Option<stages::Artifact> {
        self.answer(key, self.cache.load(key))
    }
    fn load_head(&self, key: &str) -> Option<stages::Artifact> {
        self.answer(key, self.cache.load_head(key))
    }
}

fn check(a: &RecipeArgs, catalog: &[&'static dyn Stage]) -> Exit {
    match phase1(a, catalog) {
        Ok(plan) => {
            let nodes: usize = plan
                .steps
                .iter()
                .map(|s| s.domain.as_ref().map_or(1, Vec::len))
                .sum();
            let files: usize = plan.sets.iter().map(|s| s.files.len()).sum();
            println!(
                "{}: ok ({} steps, {nodes} nodes, {files} input files, {} checks)",
                a.recipe.display(),
                plan.steps.len(),
                plan.checks.len()
            );
            Exit::Ok
        }
        Err(e) => e,
    }
}

/// Why a node will run, compared with its last run.
fn reason(plan: &Plan, graph: &Graph, n: usize, last: Option<&LastNode>, cache: &Cache) -> String {
    let node = &graph.nodes[n];
    if let Some(Err(e)) = cache.verify(&node.key) {
        return format!("cache entry corrupt ({e})");
    }
    let Some(last) = last else {
        return "new: never run".into();
    };
    let now = last_node(plan, graph, n);
    if last.key == now.key {
        return "cache entry missing".into();
    }
    if last.stage_version != now.stage_version {
        return format!(
            "new stage version ({} -> {})",
            last.stage_version, now.stage_version
        );
    }
    if last.options != now.options {
        return "changed options".into();
    }
    for (path, hash) in &now.files {
        match last.files.iter().find(|(p, _)| p == path) {
            Some((_, h)) if h != hash => return format!("changed input file {path}"),
            None => return format!("new input file {path}"),
            _ => {}
        }
    }
    for &u in &node.upstream {
        if !last.inputs.contains(&graph.nodes[u].key) {
            return format!("changed input: {}", scheduler::node_label(plan, graph, u));
        }
    }
    "changed inputs".into()
}

/// The lines `retort plan` prints: a summary, then one line per node.
pub fn plan_lines(a: &RecipeArgs, plan: &Plan) -> Result<Vec<String>, String> {
    let cache = Cache::open(&cache_dir(a, plan), true)?;
    let graph = expand(plan, &cache)?;
    let index = cache.node_index();
    let mut lines = Vec::new();
    let mut to_run = 0;
    for (i, node) in graph.nodes.iter().enumerate() {
        let label = scheduler::node_label(plan, &graph, i);
        let line = if let Some(orig) = node.same_as {
            let first = scheduler::node_label(plan, &graph, orig);
            format!("  same     {label}  (same work as {first})")
        } else if matches!(cache.verify(&node.key), Some(Ok(()))) {
            format!("  cached   {label}")
        } else {
            to_run += 1;
            let last = index.get(&identity(plan, &graph, i));
            format!(
                "  run      {label}  ({})",
                reason(plan, &graph, i, last, &cache)
            )
        };
        lines.push(line);
    }
    let n = graph.nodes.len();
    let head = format!(
        "{}: {n} nodes, {to_run} to run, {} cached",
        a.recipe.display(),
        n - to_run
    );
    lines.insert(0, head);
    Ok(lines)
}

fn plan_cmd(a: &RecipeArgs, catalog: &[&'static dyn Stage]) -> Exit {
    let plan = match phase1(a, catalog) {
        Ok(p) => p,
        Err(e) => return e,
    };
    match plan_lines(a, &plan) {
        Ok(lines) => {
            for l in lines {
                println!("{l}");
            }
            Exit::Ok
        }
        Err(e) => {
            eprintln!("error: {e}");
            Exit::StepFailed
        }
    }
}

fn report_cmd(outdir: &Path) -> Exit {
    let result = (|| -> Result<(), String> {
        let path = outdir.join("run.json");
        let text =
            std::fs::read_to_string(&path).map_err(|e| format!("{}: {e}", path.display()))?;
        let record: RunRecord =
            serde_json::from_str(&text).map_err(|e| format!("{}: {e}", path.display()))?;
        let cache = Cache::open(Path::new(&record.cache_dir), true)?;
        let tmp = tempfile::Builder::new()
            .prefix(".report-")
            .tempdir_in(outdir)
            .map_err(|e| e.to_string())?;
        let source = |key: &str| match cache.load(key) {
            crate::cache::Lookup::Found(b) => Some(b.1),
            _ => None,
        };
        crate::report::render(&record, &source, tmp.path(), None).map_err(|e| e.to_string())?;
        // Move every rendered file over the old one.
        let mut stack = vec![tmp.path().to_path_buf()];
        while let Some(dir) = stack.pop() {
            for entry in std::fs::read_dir(&dir)
                .map_err(|e| e.to_string())?
                .flatten()
            {
                let p = entry.path();
                let rel = p.strip_prefix(tmp.path()).map_err(|e| e.to_string())?;
                let target = outdir.join(rel);
                if p.is_dir() {
                    std::fs::create_dir_all(&target).map_err(|e| e.to_string())?;
                    stack.push(p);
                } else {
                    std::fs::rename(&p, &target)
                        .map_err(|e| format!("{}: {e}", target.display()))?;
                }
            }
        }
        println!("report re-rendered in {}", outdir.display());
        Ok(())
    })();
    match result {
        Ok(()) => Exit::Ok,
        Err(e) => {
            eprintln!("error: {e}");
            Exit::Usage
        }
    }
}

/// A short type name from an option's JSON schema (`$ref`s resolved in `root`).
fn type_of(schema: &serde_json::Value, root: &serde_json::Value) -> String {
    use serde_json::Value as V;
    if let Some(r) = schema.get("$ref").and_then(V::as_str) {
        let name = r.rsplit('/').next().unwrap_or(r);
        return match root.get("$defs").and_then(|d| d.get(name)) {
            Some(def) => type_of(def, root),
            None => name.to_string(),
        };
    }
    if let Some(v) = schema.get("enum").and_then(V::as_array) {
        let names: Vec<String> = v
            .iter()
            .map(|x| x.as_str().map_or(x.to_string(), str::to_string))
            .collect();
        return format!("one of {}", names.join(" | "));
    }
    for k in ["oneOf", "anyOf"] {
        if let Some(v) = schema.get(k).and_then(V::as_array) {
            let mut consts: Vec<String> = Vec::new();
            let mut all_const = true;
            for x in v {
                match (x.get("const"), x.get("enum").and_then(V::as_array)) {
                    (Some(c), _) => consts.push(c.as_str().map_or(c.to_string(), str::to_string)),
                    (None, Some(e)) => consts.extend(
                        e.iter()
                            .map(|c| c.as_str().map_or(c.to_string(), str::to_string)),
                    ),
                    _ => all_const = false,
                }
            }
            if all_const {
                return format!("one of {}", consts.join(" | "));
            }
            let parts: Vec<String> = v
                .iter()
                .map(|x| type_of(x, root))
                .filter(|t| t != "null" && !t.is_empty())
                .collect();
            return parts.join(" or ");
        }
    }
    match schema.get("type") {
        Some(V::Array(v)) => {
            let named: Vec<&str> = v
                .iter()
                .filter_map(V::as_str)
                .filter(|s| *s != "null")
                .collect();
            if named == ["array"] {
                let mut one = schema.clone();
                one["type"] = V::String("array".into());
                type_of(&one, root)
            } else {
                named.join(" or ")
            }
        }
        Some(V::String(t)) if t == "array" => match schema.get("items") {
            Some(items) => match (schema.get("minItems"), schema.get("maxItems")) {
                (Some(a), Some(b)) if a == b => format!("{a} {}s", type_of(items, root)),
                _ => format!("list of {}", type_of(items, root)),
            },
            None => "list".into(),
        },
        Some(V::String(t)) => t.clone(),
        _ => String::new(),
    }
}

pub(crate) fn stage_json(s: &dyn Stage) -> serde_json::Value {
    let info = s.info();
    let schema = serde_json::to_value(s.options_schema()).unwrap_or_default();
    let defaults = s.resolve_options(&serde_json::Value::Null).ok();
    let mut options = Vec::new();
    if let Some(props) = schema.get("properties").and_then(|p| p.as_object()) {
        for (name, p) in props {
            options.push(serde_json::json!({
                "name": name,
                "type": type_of(p, &schema),
                "default": p.get("default").cloned().or_else(|| defaults.as_ref().and_then(|d| d.get(name).cloned())),
                "unit": p.get("x-unit"),
                "description": p.get("description"),
            }));
        }
    }
    serde_json::json!({
        "name": info.name,
        "version": info.version,
        "summary": info.summary,
        "inputs": info.inputs.iter().map(|p| serde_json::json!({
            "name": p.name, "kind": p.kind.name(), "arity": format!("{:?}", p.arity).to_lowercase(),
            "optional": p.optional, "about": p.about,
        })).collect::<Vec<_>>(),
        "output": info.output.name(),
        "options": options,
        "options_schema": schema,
        "references": info.references.iter().map(|r| serde_json::json!({ "key": r.key, "citation": r.citation })).collect::<Vec<_>>(),
    })
}

fn stages_cmd(name: Option<&str>, json: bool, catalog: &[&'static dyn Stage]) -> Exit {
    let chosen: Vec<&'static dyn Stage> = match name {
        Some(n) => match catalog.iter().copied().find(|s| s.info().name == n) {
            Some(s) => vec![s],
            None => {
                let hint =
                    crate::diagnostics::did_you_mean(n, catalog.iter().map(|s| s.info().name));
                eprintln!(
                    "error: unknown stage `{n}`{}",
                    hint.map(|h| format!(" (did you mean `{h}`?)"))
                        .unwrap_or_default()
                );
                return Exit::Usage;
            }
        },
        None => catalog.to_vec(),
    };
    let docs: Vec<serde_json::Value> = chosen.iter().map(|s| stage_json(*s)).collect();
    if json {
        let v = serde_json::json!({ "schema_version": 1, "stages": docs });
        println!("{}", serde_json::to_string_pretty(&v).unwrap_or_default());
        return Exit::Ok;
    }
    if name.is_none() {
        for d in &docs {
            println!(
                "{:<28} v{:<3} {}",
                d["name"].as_str().unwrap_or(""),
                d["version"],
                d["summary"].as_str().unwrap_or("")
            );
        }
        println!("\n`retort stages NAME` shows one stage's inputs, options and sources.");
        return Exit::Ok;
    }
    for d in &docs {
        let s = |v: &serde_json::Value| match v {
            serde_json::Value::Null => "none".to_string(),
            serde_json::Value::String(t) => t.clone(),
            other => other.to_string(),
        };
        println!(
            "{} (version {})\n  {}\n",
            s(&d["name"]),
            d["version"],
            s(&d["summary"])
        );
        println!("inputs:");
        for p in d["inputs"].as_array().into_iter().flatten() {
            println!(
                "  {:<14} {} ({}{}): {}",
                s(&p["name"]),
                s(&p["kind"]),
                s(&p["arity"]),
                if p["optional"] == true {
                    ", optional"
                } else {
                    ""
                },
                s(&p["about"])
            );
        }
        println!("gives: {}\n\noptions:", s(&d["output"]));
        for o in d["options"].as_array().into_iter().flatten() {
            let unit = o["unit"].as_str().unwrap_or("").to_string();
            println!(
                "  {:<14} {:<18} default {}{}\n      {}",
                s(&o["name"]),
                s(&o["type"]),
                s(&o["default"]),
                if unit.is_empty() {
                    String::new()
                } else {
                    format!(" ({unit})")
                },
                s(&o["description"])
            );
        }
        let refs = d["references"].as_array().cloned().unwrap_or_default();
        if !refs.is_empty() {
            println!("\nreferences:");
            for r in refs {
                println!("  [{}] {}", s(&r["key"]), s(&r["citation"]));
            }
        }
    }
    Exit::Ok
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::testing::test_stage;
    use stages::stage::Port;
    use stages::Kind;

    test_stage!(
        ReadV1,
        "t.read",
        1,
        &[Port::each("file", Kind::File, "a file")]
    );
    test_stage!(
        ReadV2,
        "t.read",
        2,
        &[Port::each("file", Kind::File, "a file")]
    );
    static V1: &[&dyn Stage] = &[&ReadV1];
    static V2: &[&dyn Stage] = &[&ReadV2];

    #[test]
    fn plan_tells_a_new_stage_version_and_a_new_node_apart() {
        let t = tempfile::tempdir().unwrap();
        std::fs::write(t.path().join("a.txt"), "a").unwrap();
        let recipe = t.path().join("r.yaml");
        std::fs::write(
            &recipe,
            "id: v\nsamples:\n  s: '*.txt'\nsteps:\n  read: { stage: t.read, from: s }\n",
        )
        .unwrap();
        let r = recipe.display().to_string();
        let args = RecipeArgs {
            recipe: recipe.clone(),
            set: Vec::new(),
            allow_outside: false,
            cache: None,
        };
        let plan_with = |catalog: &[&'static dyn Stage]| {
            let plan = phase1(&args, catalog).unwrap();
            plan_lines(&args, &plan).unwrap()
        };
        assert_eq!(plan_with(V1)[1], "  run      read [a]  (new: never run)");
        let run = vec!["retort".to_string(), "run".into(), r, "--quiet".into()];
        assert_eq!(main_with(run, V1), Exit::Ok);
        assert_eq!(plan_with(V1)[1], "  cached   read [a]");
        assert_eq!(
            plan_with(V2)[1],
            "  run      read [a]  (new stage version (1 -> 2))"
        );
    }
}
