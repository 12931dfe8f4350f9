//! `retort slurm`: batch scripts that run a recipe on a Slurm cluster.
//!
//! Two jobs share one cache on a filesystem every node sees: an array job whose task
//! `i` runs `retort run RECIPE --shard (i+1)/N`, and a gather-and-report job submitted
//! with `--dependency=afterok:<array>` that runs the plain `retort run`, which finds
//! every shard's work in the cache and only gathers and reports. Everything is written
//! to `<job folder>/slurm/` (the scripts, `submit.sh` for submitting by hand, `job.json`
//! for `retort status`, and the Slurm logs under `logs/`); the report goes to
//! `<job folder>/report/`.
//!
//! Resubmitting (`--submit` again) submits only the array tasks whose shards still
//! have nodes missing from the cache, then the gather job, so a failed or cancelled
//! shard is redone and nothing else is.
//!
//! **Invariant:** scripts name the binary, the recipe, the cache and the job folder by
//! absolute paths, so they run the same from any working directory on any node.

use crate::cache::Cache;
use crate::cli::RecipeArgs;
use crate::exit::Exit;
use crate::plan::Plan;
use crate::shard;
use serde::{Deserialize, Serialize};
use stages::stage::Stage;
use std::path::{Path, PathBuf};

#[derive(clap::Args, Debug, Clone)]
pub struct SlurmArgs {
    #[command(flatten)]
    pub recipe: RecipeArgs,
    /// Number of shards (array tasks).
    #[arg(long, value_name = "N", default_value_t = 4)]
    pub shards: usize,
    /// Slurm partition (default: the cluster's default partition).
    #[arg(long, value_name = "P")]
    pub partition: Option<String>,
    /// Time limit per job, in Slurm's notation (e.g. 30:00, 2:00:00, 1-00:00:00).
    #[arg(long, value_name = "T")]
    pub time: Option<String>,
    /// CPUs per task; retort runs that many steps at once.
    #[arg(long, value_name = "C", default_value_t = 1)]
    pub cpus: usize,
    /// Memory per node, in Slurm's notation (e.g. 4G).
    #[arg(long, value_name = "M")]
    pub mem: Option<String>,
    /// Account to charge.
    #[arg(long, value_name = "A")]
    pub account: Option<String>,
    /// Job folder: scripts and logs in DIR/slurm/, the report in DIR/report/
    /// (default: slurm-job/ beside the recipe).
    #[arg(long, value_name = "DIR")]
    pub out: Option<PathBuf>,
    /// A shell line run before retort in every job, e.g. "module load gcc" (repeatable).
    #[arg(long, value_name = "LINE")]
    pub prelude: Vec<String>,
    /// Submit with sbatch and print the job ids.
    #[arg(long)]
    pub submit: bool,
    /// Print the scripts; write and submit nothing.
    #[arg(long, conflicts_with = "submit")]
    pub dry_run: bool,
}

/// Everything the scripts are made from (absolute paths).
#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct JobSpec {
    pub schema_version: u32,
    pub recipe: String,
    pub cache: String,
    pub job_dir: String,
    pub report_dir: String,
    pub exe: String,
    pub shards: usize,
    pub cpus: usize,
    pub partition: Option<String>,
    pub time: Option<String>,
    pub mem: Option<String>,
    pub account: Option<String>,
    pub prelude: Vec<String>,
    /// `--set NAME=VALUE` and `--allow-outside`, passed on to every run.
    pub run_args: Vec<String>,
    /// Short id used in job names.
    pub name: String,
    /// Where the shard logs go (`<cache>/shards/<id>`).
    pub shard_logs: String,
    #[serde(default)]
    pub submissions: Vec<Submission>,
}

#[derive(Clone, Debug, PartialEq, Serialize, Deserialize)]
pub struct Submission {
    pub at: String,
    /// Array job id, None when every shard was already complete.
    pub shards_job: Option<String>,
    /// Array task ids submitted (0-based), as given to `--array`.
    pub tasks: String,
    pub gather_job: String,
}

/// Quotes a string for a POSIX shell.
pub fn sh_quote(s: &str) -> String {
    if !s.is_empty()
        && s.bytes()
            .all(|b| b.is_ascii_alphanumeric() || b"/._-+=:,@%".contains(&b))
    {
        return s.to_string();
    }
    format!("'{}'", s.replace('\'', r"'\''"))
}

/// `0-3`, `1,3`, `0-2,5`.
pub fn task_ranges(tasks: &[usize]) -> String {
    let mut out: Vec<String> = Vec::new();
    let mut i = 0;
    while i < tasks.len() {
        let mut j = i;
        while j + 1 < tasks.len() && tasks[j + 1] == tasks[j] + 1 {
            j += 1;
        }
        out.push(if i == j {
            tasks[i].to_string()
        } else {
            format!("{}-{}", tasks[i], tasks[j])
        });
        i = j + 1;
    }
    out.join(",")
}

fn directives(spec: &JobSpec, job_name: &str, output: &str) -> String {
    let mut d = vec![
        format!("#SBATCH --job-name={job_name}"),
        format!("#SBATCH --output={output}"),
        "#SBATCH --ntasks=1".to_string(),
        format!("#SBATCH --cpus-per-task={}", spec.cpus.max(1)),
    ];
    let opt = [
        ("partition", &spec.partition),
        ("time", &spec.time),
        ("mem", &spec.mem),
        ("account", &spec.account),
    ];
    for (k, v) in opt {
        if let Some(v) = v {
            d.push(format!("#SBATCH --{k}={v}"));
        }
    }
    d.join("\n")
}

fn prelude(spec: &JobSpec) -> String {
    if spec.prelude.is_empty() {
        "# (no --prelude lines: add `module load ...` here if your site needs it)".into()
    } else {
        spec.prelude.join("\n")
    }
}

fn run_line(spec: &JobSpec, extra: &[String]) -> String {
    let mut words = vec![
        sh_quote(&spec.exe),
        "run".into(),
        sh_quote(&spec.recipe),
        "--cache".into(),
        sh_quote(&spec.cache),
    ];
    words.extend(spec.run_args.iter().map(|a| sh_quote(a)));
    words.extend(extra.iter().cloned());
    words.push("--jobs".into());
    words.push(format!(
        "\"${{SLURM_CPUS_PER_TASK:-{}}}\"",
        spec.cpus.max(1)
    ));
    words.join(" ")
}

/// The array job script.
pub fn shards_script(spec: &JobSpec) -> String {
    let logs = format!("{}/slurm/logs", spec.job_dir);
    format!(
        r#"#!/bin/bash
# retort {ver}: shard array for {recipe}
# Task i runs shard i+1 of {n} into the shared cache {cache}.
{directives}
#SBATCH --array=0-{last}
set -u
{prelude}
K=$((SLURM_ARRAY_TASK_ID + 1))
LOG={logdir}/$(printf 'shard-%04d-of-%04d.json' "$K" {n})
rm -f "$LOG"
{run}
rc=$?
# Exit 1 with a finished shard log means some items failed on their own data: they
# are recorded in the log and shown by the final report, so the gather job must run.
if [ "$rc" -eq 1 ] && grep -q '"state": "finished"' "$LOG" 2>/dev/null; then
  exit 0
fi
exit "$rc"
"#,
        ver = crate::VERSION,
        recipe = spec.recipe,
        n = spec.shards,
        cache = spec.cache,
        directives = directives(
            spec,
            &format!("retort-{}-shards", spec.name),
            &format!("{logs}/shard-%A_%a.log")
        ),
        last = spec.shards.saturating_sub(1),
        prelude = prelude(spec),
        logdir = sh_quote(&spec.shard_logs),
        run = run_line(
            spec,
            &[
                "--shard".into(),
                format!("\"$K/{}\"", spec.shards),
                "--quiet".into()
            ]
        ),
    )
}

/// The gather-and-report job script (submitted with an afterok dependency).
pub fn gather_script(spec: &JobSpec) -> String {
    let logs = format!("{}/slurm/logs", spec.job_dir);
    format!(
        r#"#!/bin/bash
# retort {ver}: gather and report for {recipe}
# Runs after every shard succeeded; takes their work from the cache {cache}.
{directives}
#SBATCH --kill-on-invalid-dep=yes
set -u
{prelude}
{run}
"#,
        ver = crate::VERSION,
        recipe = spec.recipe,
        cache = spec.cache,
        directives = directives(
            spec,
            &format!("retort-{}-gather", spec.name),
            &format!("{logs}/gather-%j.log")
        ),
        prelude = prelude(spec),
        run = run_line(spec, &["--out".into(), sh_quote(&spec.report_dir)]),
    )
}

/// A script that submits both jobs by hand (what `--submit` does, minus skipping
/// complete shards).
pub fn submit_script(spec: &JobSpec) -> String {
    let dir = sh_quote(&format!("{}/slurm", spec.job_dir));
    format!(
        r#"#!/bin/bash
# Submits the shard array, then the gather job that waits for it (afterok).
set -euo pipefail
cd {dir}
A=$(sbatch --parsable shards.sbatch); A=${{A%%;*}}
G=$(sbatch --parsable --dependency=afterok:"$A" gather.sbatch); G=${{G%%;*}}
echo "shards job $A, gather job $G"
"#
    )
}

fn absolute(p: &Path) -> Result<PathBuf, String> {
    let a = std::path::absolute(p).map_err(|e| format!("{}: {e}", p.display()))?;
    Ok(a.canonicalize().unwrap_or(a))
}

/// Builds the job description from the arguments and the plan.
pub fn job_spec(a: &SlurmArgs, plan: &Plan) -> Result<JobSpec, String> {
    if a.shards == 0 {
        return Err("--shards must be at least 1".into());
    }
    let recipe = absolute(&shard::recipe_path(plan))?;
    let cache = crate::cli::cache_dir(&a.recipe, plan);
    let cache = absolute(&cache)?;
    let job_dir = absolute(
        &a.out
            .clone()
            .unwrap_or_else(|| plan.policy.root.join("slurm-job")),
    )?;
    let exe = std::env::current_exe()
        .map_err(|e| format!("cannot find the retort binary: {e}"))
        .and_then(|p| absolute(&p))?;
    let mut run_args = Vec::new();
    for s in &a.recipe.set {
        run_args.push("--set".to_string());
        run_args.push(s.clone());
    }
    if a.recipe.allow_outside {
        run_args.push("--allow-outside".into());
    }
    let id = plan.recipes.first().map(|r| r.id.as_str()).unwrap_or("run");
    let name: String = id
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' || c == '_' {
                c
            } else {
                '_'
            }
        })
        .collect();
    Ok(JobSpec {
        schema_version: 1,
        recipe: recipe.to_string_lossy().to_string(),
        shard_logs: shard::log_dir(&cache, plan).to_string_lossy().to_string(),
        cache: cache.to_string_lossy().to_string(),
        report_dir: job_dir.join("report").to_string_lossy().to_string(),
        job_dir: job_dir.to_string_lossy().to_string(),
        exe: exe.to_string_lossy().to_string(),
        shards: a.shards,
        cpus: a.cpus.max(1),
        partition: a.partition.clone(),
        time: a.time.clone(),
        mem: a.mem.clone(),
        account: a.account.clone(),
        prelude: a.prelude.clone(),
        run_args,
        name,
        submissions: Vec::new(),
    })
}

/// 0-based array tasks whose shard still has a fan-out node missing from the cache.
pub fn incomplete_tasks(graph: &crate::graph::Graph, cache: &Cache, n: usize) -> Vec<usize> {
    let assigned = shard::assignment(graph, n);
    let mut missing = vec![false; n];
    for (node, s) in graph.nodes.iter().zip(&assigned) {
        if let Some(s) = s {
            if !missing[*s] && !cache.contains(&node.key) {
                missing[*s] = true;
            }
        }
    }
    (0..n).filter(|&s| missing[s]).collect()
}

fn sbatch(args: &[String]) -> Result<String, String> {
    let bin = std::env::var("RETORT_SBATCH").unwrap_or_else(|_| "sbatch".into());
    let out = std::process::Command::new(&bin)
        .args(args)
        .output()
        .map_err(|e| format!("cannot run {bin}: {e} (is Slurm installed on this machine?)"))?;
    if !out.status.success() {
        return Err(format!(
            "{bin} {} failed: {}",
            args.join(" "),
            String::from_utf8_lossy(&out.stderr).trim()
        ));
    }
    let text = String::from_utf8_lossy(&out.stdout);
    // --parsable prints `jobid` or `jobid;cluster`.
    let id = text.trim().split(';').next().unwrap_or("").to_string();
    if id.is_empty() || !id.bytes().all(|b| b.is_ascii_digit()) {
        return Err(format!("{bin} printed no job id: {}", text.trim()));
    }
    Ok(id)
}

fn write_file(path: &Path, text: &str, executable: bool) -> Result<(), String> {
    std::fs::write(path, text).map_err(|e| format!("{}: {e}", path.display()))?;
    #[cfg(unix)]
    if executable {
        use std::os::unix::fs::PermissionsExt;
        let _ = std::fs::set_permissions(path, std::fs::Permissions::from_mode(0o755));
    }
    Ok(())
}

pub fn job_file(job_dir: &Path) -> PathBuf {
    job_dir.join("slurm").join("job.json")
}

pub fn read_job(job_dir: &Path) -> Result<JobSpec, String> {
    let p = job_file(job_dir);
    let text = std::fs::read_to_string(&p).map_err(|e| format!("{}: {e}", p.display()))?;
    serde_json::from_str(&text).map_err(|e| format!("{}: {e}", p.display()))
}

fn save_job(spec: &JobSpec) -> Result<(), String> {
    let text = serde_json::to_string_pretty(spec).map_err(|e| e.to_string())? + "\n";
    let path = job_file(Path::new(&spec.job_dir));
    let tmp = path.with_extension("json.tmp");
    write_file(&tmp, &text, false)?;
    std::fs::rename(&tmp, &path).map_err(|e| format!("{}: {e}", path.display()))
}

pub fn command(a: &SlurmArgs, catalog: &[&'static dyn Stage]) -> Exit {
    let plan = match crate::cli::phase1(&a.recipe, catalog) {
        Ok(p) => p,
        Err(e) => return e,
    };
    match command_plan(a, &plan) {
        Ok(e) => e,
        Err(msg) => {
            eprintln!("error: {msg}");
            Exit::StepFailed
        }
    }
}

fn warn_cache(cache: &str) {
    for local in ["/tmp", "/var/tmp", "/dev/shm", "/run"] {
        if Path::new(cache).starts_with(local) {
            eprintln!(
                "warning: the cache {cache} is under {local}, which on most clusters is local \
                 to each node; shards on other nodes will not see each other's work. Use \
                 --cache on a shared filesystem."
            );
        }
    }
}

fn command_plan(a: &SlurmArgs, plan: &Plan) -> Result<Exit, String> {
    if !a.dry_run {
        // Create the cache first, so its path is canonical in the scripts (the
        // shards name their logs by the canonical path).
        let dir = crate::cli::cache_dir(&a.recipe, plan);
        std::fs::create_dir_all(&dir).map_err(|e| format!("{}: {e}", dir.display()))?;
    }
    let mut spec = job_spec(a, plan)?;
    if a.dry_run {
        print!(
            "# {}/slurm/shards.sbatch\n{}\n# {}/slurm/gather.sbatch (submitted with --dependency=afterok:<shards job>)\n{}",
            spec.job_dir,
            shards_script(&spec),
            spec.job_dir,
            gather_script(&spec)
        );
        return Ok(Exit::Ok);
    }
    warn_cache(&spec.cache);
    let dir = Path::new(&spec.job_dir).join("slurm");
    std::fs::create_dir_all(dir.join("logs")).map_err(|e| format!("{}: {e}", dir.display()))?;
    let cache = Cache::open(Path::new(&spec.cache), true)?;
    std::fs::create_dir_all(&spec.shard_logs).map_err(|e| format!("{}: {e}", spec.shard_logs))?;
    if let Ok(old) = read_job(Path::new(&spec.job_dir)) {
        spec.submissions = old.submissions;
    }
    write_file(&dir.join("shards.sbatch"), &shards_script(&spec), true)?;
    write_file(&dir.join("gather.sbatch"), &gather_script(&spec), true)?;
    write_file(&dir.join("submit.sh"), &submit_script(&spec), true)?;
    save_job(&spec)?;
    if !a.submit {
        println!(
            "wrote {}/{{shards.sbatch,gather.sbatch,submit.sh}}; submit with `bash {}/submit.sh` or `retort slurm ... --submit`",
            dir.display(),
            dir.display()
        );
        return Ok(Exit::Ok);
    }
    let graph = crate::cli::expand(plan, &cache)?;
    let tasks = incomplete_tasks(&graph, &cache, spec.shards);
    let shards_file = dir.join("shards.sbatch").to_string_lossy().to_string();
    let gather_file = dir.join("gather.sbatch").to_string_lossy().to_string();
    let (shards_job, ranges) = if tasks.is_empty() {
        println!("every shard's work is already in the cache; submitting the gather job only");
        (None, String::new())
    } else {
        let ranges = task_ranges(&tasks);
        let id = sbatch(&[
            "--parsable".into(),
            format!("--array={ranges}"),
            shards_file,
        ])?;
        (Some(id), ranges)
    };
    let mut gather_args = vec!["--parsable".to_string()];
    if let Some(id) = &shards_job {
        gather_args.push(format!("--dependency=afterok:{id}"));
    }
    gather_args.push(gather_file);
    let gather_job = sbatch(&gather_args)?;
    match &shards_job {
        Some(id) => println!(
            "submitted shards job {id} (array tasks {ranges} of 0-{}) and gather job {gather_job} (runs after {id} succeeds)",
            spec.shards - 1
        ),
        None => println!("submitted gather job {gather_job}"),
    }
    println!("report will be in {}", spec.report_dir);
    spec.submissions.push(Submission {
        at: crate::timefmt::now_rfc3339(),
        shards_job,
        tasks: ranges,
        gather_job,
    });
    save_job(&spec)?;
    Ok(Exit::Ok)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn quoting_and_ranges() {
        assert_eq!(sh_quote("/a/b-c.yaml"), "/a/b-c.yaml");
        assert_eq!(sh_quote("a b"), "'a b'");
        assert_eq!(sh_quote("it's"), r"'it'\''s'");
        assert_eq!(task_ranges(&[0, 1, 2, 3]), "0-3");
        assert_eq!(task_ranges(&[1, 3]), "1,3");
        assert_eq!(task_ranges(&[0, 1, 2, 5, 7, 8]), "0-2,5,7-8");
        assert_eq!(task_ranges(&[]), "");
    }
}
