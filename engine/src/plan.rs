//! Phase one, second half: the raw recipes of an include tree become one resolved,
//! type-checked plan.
//!
//! Parameters are typed and overridden (`--set`, `include: set:`), `{{ name }}`
//! templates substituted, sample-set globs expanded into items, options resolved
//! through each stage's `resolve_options`, `from` connected to ports and
//! kind-checked, cycles spelled out, steps put in topological order. Every problem is
//! gathered before returning; warnings are kept apart from errors.
//!
//! **Invariant:** nothing here reads file contents (only names) or runs a stage.

use crate::diagnostics::{did_you_mean, Diagnostic, Problem};
use crate::recipe::spans::{Pos, Seg};
use crate::recipe::{load_tree, Loaded, PathPolicy};
use crate::record::ParameterRecord;
use serde_json::Value as J;
use serde_yaml::Value as Y;
use stages::stage::{Arity, Stage};
use stages::Kind;
use std::collections::{BTreeMap, BTreeSet, BinaryHeap, HashMap};
use std::path::PathBuf;

/// A resolved recipe of the tree.
#[derive(Debug, Clone)]
pub struct PlanRecipe {
    pub id: String,
    pub title: String,
    pub description: String,
    pub author: String,
    pub shown: String,
    pub source: String,
    pub hash: String,
    pub namespace: String,
}

#[derive(Debug, Clone)]
pub struct SampleFile {
    pub item: String,
    pub path: PathBuf,
    pub shown: String,
}

#[derive(Debug, Clone)]
pub struct SampleSet {
    pub recipe: usize,
    pub name: String,
    /// Ordered by item name.
    pub files: Vec<SampleFile>,
}

/// Where a port reads from.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Src {
    Set(usize),
    Step(usize),
}

#[derive(Debug, Clone)]
pub enum PortPlan {
    Missing,
    /// One value per run (fan-out over items, broadcast of a single value).
    One(Src),
    /// Every item of the source at once.
    Gather(Src),
    /// One value from each source for the same item.
    Several(Vec<Src>),
}

#[derive(Clone)]
pub struct PlanStep {
    /// Namespaced id (`xps/charge`), unique in the plan.
    pub id: String,
    pub recipe: usize,
    pub stage: &'static dyn Stage,
    pub options: J,
    pub methods: String,
    pub about: String,
    pub ports: Vec<PortPlan>,
    /// Items the step runs over, or None for a single run.
    pub domain: Option<Vec<String>>,
}

impl std::fmt::Debug for PlanStep {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("PlanStep")
            .field("id", &self.id)
            .field("stage", &self.stage.info().name)
            .field("options", &self.options)
            .field("ports", &self.ports)
            .field("domain", &self.domain)
            .finish()
    }
}

#[derive(Debug, Clone, PartialEq)]
pub enum Expect {
    Near { value: f64, tolerance: f64 },
    Within { low: f64, high: f64 },
}

#[derive(Debug, Clone)]
pub struct PlanCheck {
    pub recipe: usize,
    /// `step.name` as written.
    pub result: String,
    pub step: usize,
    pub name: String,
    pub item: Option<String>,
    pub expect: Expect,
}

#[derive(Debug)]
pub struct Plan {
    pub policy: PathPolicy,
    pub recipes: Vec<PlanRecipe>,
    pub parameters: Vec<ParameterRecord>,
    pub sets: Vec<SampleSet>,
    /// Topological order; ties in recipe order.
    pub steps: Vec<PlanStep>,
    pub checks: Vec<PlanCheck>,
}

impl Plan {
    pub fn src_name(&self, s: Src) -> String {
        match s {
            Src::Set(i) => format!("samples:{}", self.sets[i].name),
            Src::Step(i) => self.steps[i].id.clone(),
        }
    }
}

/// The outcome of phase one.
pub struct Phase1 {
    pub plan: Option<Plan>,
    pub diagnostics: Vec<Diagnostic>,
    /// Recipe texts by shown name, for rendering diagnostics.
    pub sources: Vec<(String, String)>,
}

impl Phase1 {
    pub fn render_diagnostics(&self) -> String {
        let src = |name: &str| {
            self.sources
                .iter()
                .find(|(n, _)| n == name)
                .map(|(_, t)| t.clone())
        };
        crate::diagnostics::render_all(&self.diagnostics, &src)
    }
    pub fn has_errors(&self) -> bool {
        self.diagnostics.iter().any(Diagnostic::is_error)
    }
}

/// Loads and resolves the recipe at `top`. `sets` are the `NAME=VALUE` overrides.
pub fn build(
    top: &std::path::Path,
    sets: &[String],
    allow_outside: bool,
    catalog: &[&'static dyn Stage],
) -> Phase1 {
    let (loaded, policy, mut diags, sources) = load_tree(top, allow_outside);
    if loaded.is_empty() {
        return Phase1 {
            plan: None,
            diagnostics: diags,
            sources,
        };
    }
    let mut r = Resolver {
        loaded: &loaded,
        policy: &policy,
        catalog,
        diags: Vec::new(),
        failed_sets: BTreeSet::new(),
    };
    let plan = r.resolve(sets);
    diags.append(&mut r.diags);
    let errors = diags.iter().any(Diagnostic::is_error);
    Phase1 {
        plan: if errors { None } else { Some(plan) },
        diagnostics: diags,
        sources,
    }
}

/// Type of a parameter, inferred from its declared value.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum ParamType {
    Integer,
    Number,
    Text,
    Bool,
    List,
}

impl ParamType {
    fn of(v: &J) -> Option<ParamType> {
        match v {
            J::Number(n) if n.is_i64() || n.is_u64() => Some(ParamType::Integer),
            J::Number(_) => Some(ParamType::Number),
            J::String(_) => Some(ParamType::Text),
            J::Bool(_) => Some(ParamType::Bool),
            J::Array(_) => Some(ParamType::List),
            _ => None,
        }
    }
    fn described(self) -> &'static str {
        match self {
            ParamType::Integer => "an integer",
            ParamType::Number => "a number",
            ParamType::Text => "text",
            ParamType::Bool => "true or false",
            ParamType::List => "a list",
        }
    }
    /// `v` as this type, when it fits (an integer is a number; an integral number is
    /// an integer).
    fn coerce(self, v: J) -> Option<J> {
        match (self, &v) {
            (ParamType::Number, J::Number(n)) => n
                .as_f64()
                .and_then(|f| serde_json::Number::from_f64(f).map(J::Number)),
            (ParamType::Integer, J::Number(n)) => {
                if n.is_i64() || n.is_u64() {
                    Some(v)
                } else {
                    n.as_f64()
                        .filter(|f| f.fract() == 0.0 && f.abs() < 9.0e15)
                        .map(|f| J::from(f as i64))
                }
            }
            (ParamType::Text, J::String(_))
            | (ParamType::Bool, J::Bool(_))
            | (ParamType::List, J::Array(_)) => Some(v),
            _ => None,
        }
    }
    /// Parses a command-line value.
    fn parse(self, s: &str) -> Option<J> {
        match self {
            ParamType::Integer => s.trim().parse::<i64>().ok().map(J::from),
            ParamType::Number => s
                .trim()
                .parse::<f64>()
                .ok()
                .filter(|f| f.is_finite())
                .and_then(serde_json::Number::from_f64)
                .map(J::Number),
            ParamType::Text => Some(J::String(s.to_string())),
            ParamType::Bool => match s.trim() {
                "true" => Some(J::Bool(true)),
                "false" => Some(J::Bool(false)),
                _ => None,
            },
            ParamType::List => serde_yaml::from_str::<Y>(s)
                .ok()
                .and_then(|y| yaml_to_json(&y).ok())
                .filter(J::is_array),
        }
    }
}

/// Plain YAML to JSON (no templates). Errors on non-finite numbers.
fn yaml_to_json(y: &Y) -> Result<J, String> {
    Ok(match y {
        Y::Null => J::Null,
        Y::Bool(b) => J::Bool(*b),
        Y::Number(n) => {
            if let Some(i) = n.as_i64() {
                J::from(i)
            } else if let Some(u) = n.as_u64() {
                J::from(u)
            } else {
                let f = n.as_f64().unwrap_or(f64::NAN);
                J::Number(
                    serde_json::Number::from_f64(f)
                        .ok_or_else(|| format!("{f} is not a finite number"))?,
                )
            }
        }
        Y::String(s) => J::String(s.clone()),
        Y::Sequence(v) => J::Array(v.iter().map(yaml_to_json).collect::<Result<_, _>>()?),
        Y::Mapping(m) => {
            let mut o = serde_json::Map::new();
            for (k, v) in m {
                let key = match k {
                    Y::String(s) => s.clone(),
                    other => serde_yaml::to_string(other)
                        .unwrap_or_default()
                        .trim()
                        .to_string(),
                };
                o.insert(key, yaml_to_json(v)?);
            }
            J::Object(o)
        }
        Y::Tagged(t) => yaml_to_json(&t.value)?,
    })
}

struct Param {
    value: J,
    ty: ParamType,
}

struct Resolver<'a> {
    loaded: &'a [Loaded],
    policy: &'a PathPolicy,
    catalog: &'a [&'static dyn Stage],
    diags: Vec<Diagnostic>,
    /// (recipe, name) of sample sets that failed to expand: reading from them is
    /// not reported again.
    failed_sets: BTreeSet<(usize, String)>,
}

/// A step as declared, before ordering.
struct Decl {
    id: String,
    local: String,
    recipe: usize,
    stage: Option<&'static dyn Stage>,
    options: J,
    about: String,
    ports: Vec<PortPlan>,
}

fn k(s: &str) -> Seg {
    Seg::key(s)
}

impl<'a> Resolver<'a> {
    fn err(&mut self, r: usize, problem: Problem, pos: Pos) {
        let file = self.loaded[r].shown.clone();
        self.diags
            .push(Diagnostic::error(problem, Some(&file), Some(pos)));
    }
    fn warn(&mut self, r: usize, problem: Problem, pos: Pos) {
        let file = self.loaded[r].shown.clone();
        self.diags
            .push(Diagnostic::warning(problem, Some(&file), Some(pos)));
    }
    /// A sample-set problem located at the value of `path`.
    fn bad_set(&mut self, r: usize, set: &str, path: &[Seg], message: &str) {
        let pos = self.val_pos(r, path);
        let problem = Problem::BadSampleSet {
            set: set.into(),
            message: message.into(),
        };
        self.err(r, problem, pos);
    }
    fn key_pos(&self, r: usize, path: &[Seg]) -> Pos {
        self.loaded[r].spans.key(path)
    }
    fn val_pos(&self, r: usize, path: &[Seg]) -> Pos {
        self.loaded[r].spans.value(path)
    }

    fn resolve(&mut self, sets: &[String]) -> Plan {
        let loaded = self.loaded;
        let mut recipes = Vec::new();
        for l in loaded {
            recipes.push(PlanRecipe {
                id: l.raw.id.clone(),
                title: l.raw.title.clone(),
                description: l.raw.description.clone(),
                author: l.raw.author.clone(),
                shown: l.shown.clone(),
                source: l.text.clone(),
                hash: blake3::hash(l.text.as_bytes()).to_hex().to_string(),
                namespace: l.namespace.clone(),
            });
        }
        // Parameters, top-down (a child's `set:` may use its parent's parameters).
        let mut envs: Vec<BTreeMap<String, Param>> = Vec::new();
        let mut parameters = Vec::new();
        for (r, l) in loaded.iter().enumerate() {
            let (env, recs) = self.parameters(r, l, sets, &envs);
            envs.push(env);
            parameters.extend(recs);
        }
        // Sample sets.
        let mut set_index: Vec<HashMap<String, usize>> = Vec::new();
        let mut all_sets = Vec::new();
        for (r, l) in loaded.iter().enumerate() {
            let mut idx = HashMap::new();
            for (name, spec) in &l.raw.samples.0 {
                match self.sample_set(r, name, spec, &envs[r]) {
                    Some(files) => {
                        idx.insert(name.clone(), all_sets.len());
                        all_sets.push(SampleSet {
                            recipe: r,
                            name: name.clone(),
                            files,
                        });
                    }
                    None => {
                        self.failed_sets.insert((r, name.clone()));
                    }
                }
            }
            set_index.push(idx);
        }
        // Steps: declare, then connect.
        let mut decls: Vec<Decl> = Vec::new();
        let mut by_id: HashMap<String, usize> = HashMap::new();
        for (r, l) in loaded.iter().enumerate() {
            for (local, step) in &l.raw.steps.0 {
                let id = format!("{}{local}", l.namespace);
                let path = [k("steps"), Seg::Key(local.clone())];
                if !valid_id(local) {
                    let p = self.key_pos(r, &path);
                    self.err(
                        r,
                        Problem::BadId {
                            what: "step id",
                            id: local.clone(),
                        },
                        p,
                    );
                }
                if by_id.contains_key(&id) {
                    if !l.spans.duplicates.iter().any(|d| d.path == path) {
                        let p = self.key_pos(r, &path);
                        self.err(r, Problem::DuplicateStep { id: id.clone() }, p);
                    }
                    continue;
                }
                let stage = self
                    .catalog
                    .iter()
                    .copied()
                    .find(|s| s.info().name == step.stage);
                if stage.is_none() {
                    let suggestion =
                        did_you_mean(&step.stage, self.catalog.iter().map(|s| s.info().name));
                    let mut sp = path.to_vec();
                    sp.push(k("stage"));
                    let p = self.val_pos(r, &sp);
                    self.err(
                        r,
                        Problem::UnknownStage {
                            stage: step.stage.clone(),
                            suggestion,
                        },
                        p,
                    );
                }
                by_id.insert(id.clone(), decls.len());
                decls.push(Decl {
                    id,
                    local: local.clone(),
                    recipe: r,
                    stage,
                    options: J::Null,
                    about: step.about.clone(),
                    ports: Vec::new(),
                });
            }
        }
        for di in 0..decls.len() {
            let r = decls[di].recipe;
            let local = decls[di].local.clone();
            let Some(step) = loaded[r]
                .raw
                .steps
                .0
                .iter()
                .find(|(n, _)| *n == local)
                .map(|(_, s)| s)
            else {
                continue;
            };
            let Some(stage) = decls[di].stage else {
                continue;
            };
            let path = vec![k("steps"), Seg::Key(local.clone())];
            decls[di].options = self.options(
                r,
                &path,
                &decls[di].id,
                stage,
                step.options.as_ref(),
                &envs[r],
            );
            let kinds: Vec<Option<Kind>> = decls
                .iter()
                .map(|d| d.stage.map(|s| s.info().output))
                .collect();
            decls[di].ports = self.connect(
                r,
                &path,
                &decls[di].id,
                stage,
                step.from.as_ref(),
                &set_index[r],
                &by_id,
                &kinds,
                &all_sets,
            );
        }
        // Unused sample sets.
        for (si, set) in all_sets.iter().enumerate() {
            let used = decls.iter().any(|d| {
                d.ports
                    .iter()
                    .any(|p| port_sources(p).contains(&Src::Set(si)))
            });
            if !used {
                let p = self.key_pos(set.recipe, &[k("samples"), Seg::Key(set.name.clone())]);
                self.warn(
                    set.recipe,
                    Problem::UnusedSampleSet {
                        set: set.name.clone(),
                    },
                    p,
                );
            }
        }
        let order = self.order(&decls);
        // Re-index steps into topological order.
        let mut new_index = vec![usize::MAX; decls.len()];
        for (n, &d) in order.iter().enumerate() {
            new_index[d] = n;
        }
        let remap = |s: Src| match s {
            Src::Step(i) => Src::Step(new_index[i]),
            other => other,
        };
        let mut steps: Vec<PlanStep> = Vec::new();
        for &d in &order {
            let decl = &decls[d];
            let Some(stage) = decl.stage else { continue };
            let ports: Vec<PortPlan> = decl
                .ports
                .iter()
                .map(|p| match p {
                    PortPlan::Missing => PortPlan::Missing,
                    PortPlan::One(s) => PortPlan::One(remap(*s)),
                    PortPlan::Gather(s) => PortPlan::Gather(remap(*s)),
                    PortPlan::Several(v) => {
                        PortPlan::Several(v.iter().map(|s| remap(*s)).collect())
                    }
                })
                .collect();
            let domain = self.domain(decl, &ports, &steps, &all_sets);
            steps.push(PlanStep {
                id: decl.id.clone(),
                recipe: decl.recipe,
                stage,
                methods: stage.methods(&decl.options),
                options: decl.options.clone(),
                about: decl.about.clone(),
                ports,
                domain,
            });
        }
        if decls.is_empty() && self.diags.iter().all(|d| !d.is_error()) {
            self.warn(
                0,
                Problem::NoSteps,
                Pos {
                    line: 1,
                    col: 1,
                    len: 1,
                },
            );
        }
        let checks = self.checks(&steps, &new_index, &by_id, &envs);
        Plan {
            policy: self.policy.clone(),
            recipes,
            parameters,
            sets: all_sets,
            steps,
            checks,
        }
    }

    fn parameters(
        &mut self,
        r: usize,
        l: &Loaded,
        sets: &[String],
        envs: &[BTreeMap<String, Param>],
    ) -> (BTreeMap<String, Param>, Vec<ParameterRecord>) {
        let mut env = BTreeMap::new();
        let mut order = Vec::new();
        for (name, p) in &l.raw.parameters.0 {
            let path = [k("parameters"), Seg::Key(name.clone())];
            if !valid_id(name) {
                let pos = self.key_pos(r, &path);
                self.err(
                    r,
                    Problem::BadId {
                        what: "parameter name",
                        id: name.clone(),
                    },
                    pos,
                );
            }
            let vpath = [k("parameters"), Seg::Key(name.clone()), k("value")];
            let typed = yaml_to_json(&p.value).and_then(|v| match ParamType::of(&v) {
                Some(ty) => Ok((v, ty)),
                None => Err(
                    "a value must be a number, an integer, text, true/false or a list".to_string(),
                ),
            });
            let (value, ty) = match typed {
                Ok(t) => t,
                Err(message) => {
                    let pos = self.val_pos(r, &vpath);
                    let problem = Problem::BadParameter {
                        name: name.clone(),
                        message,
                    };
                    self.err(r, problem, pos);
                    continue;
                }
            };
            order.push((name.clone(), p.unit.clone(), p.about.clone()));
            env.insert(name.clone(), Param { value, ty });
        }
        let mut overridden = BTreeSet::new();
        if r == 0 {
            for arg in sets {
                let Some((name, value)) = arg.split_once('=') else {
                    self.diags.push(Diagnostic::error(
                        Problem::BadSetSyntax { arg: arg.clone() },
                        None,
                        None,
                    ));
                    continue;
                };
                let name = name.trim();
                match env.get_mut(name) {
                    None => {
                        let suggestion =
                            did_you_mean(name, l.raw.parameters.0.iter().map(|(n, _)| n.as_str()));
                        self.diags.push(Diagnostic::error(
                            Problem::UnknownSetParameter {
                                name: name.to_string(),
                                suggestion,
                            },
                            None,
                            None,
                        ));
                    }
                    Some(p) => match p.ty.parse(value) {
                        Some(v) => {
                            p.value = v;
                            overridden.insert(name.to_string());
                        }
                        None => self.diags.push(Diagnostic::error(
                            Problem::BadSetValue {
                                name: name.to_string(),
                                expected: p.ty.described(),
                                value: value.to_string(),
                            },
                            None,
                            None,
                        )),
                    },
                }
            }
        }
        if let Some(parent) = l.parent {
            for (name, value, at) in &l.passed {
                let pos = self.loaded[parent].spans.key(at);
                let Some(ty) = env.get(name).map(|p| p.ty) else {
                    let suggestion =
                        did_you_mean(name, l.raw.parameters.0.iter().map(|(n, _)| n.as_str()));
                    self.err(
                        parent,
                        Problem::UnknownParameter {
                            name: name.clone(),
                            suggestion,
                        },
                        pos,
                    );
                    continue;
                };
                let Some(v) = self.substitute(parent, at, value, &envs[parent]) else {
                    continue;
                };
                match ty.coerce(v.clone()) {
                    Some(v) => {
                        if let Some(p) = env.get_mut(name) {
                            p.value = v;
                        }
                        overridden.insert(name.clone());
                    }
                    None => {
                        let vpos = self.loaded[parent].spans.value(at);
                        let message =
                            format!("`set` gives {v}, but the parameter is {}", ty.described());
                        self.err(
                            parent,
                            Problem::BadParameter {
                                name: name.clone(),
                                message,
                            },
                            vpos,
                        );
                    }
                }
            }
        }
        let recs = order
            .into_iter()
            .filter_map(|(name, unit, about)| {
                env.get(&name).map(|p| ParameterRecord {
                    recipe: l.raw.id.clone(),
                    overridden: overridden.contains(&name),
                    value: p.value.clone(),
                    name,
                    unit,
                    about,
                })
            })
            .collect();
        (env, recs)
    }

    /// Substitutes `{{ name }}` templates in a YAML value, giving JSON.
    fn substitute(
        &mut self,
        r: usize,
        path: &[Seg],
        y: &Y,
        env: &BTreeMap<String, Param>,
    ) -> Option<J> {
        match y {
            Y::String(s) => self.template(r, path, s, env),
            Y::Sequence(v) => {
                let mut out = Vec::new();
                let mut ok = true;
                for (i, e) in v.iter().enumerate() {
                    let mut p = path.to_vec();
                    p.push(Seg::Index(i));
                    match self.substitute(r, &p, e, env) {
                        Some(j) => out.push(j),
                        None => ok = false,
                    }
                }
                ok.then_some(J::Array(out))
            }
            Y::Mapping(m) => {
                let mut o = serde_json::Map::new();
                let mut ok = true;
                for (key, e) in m {
                    let key = match key {
                        Y::String(s) => s.clone(),
                        other => serde_yaml::to_string(other)
                            .unwrap_or_default()
                            .trim()
                            .to_string(),
                    };
                    let mut p = path.to_vec();
                    p.push(Seg::Key(key.clone()));
                    match self.substitute(r, &p, e, env) {
                        Some(j) => {
                            o.insert(key, j);
                        }
                        None => ok = false,
                    }
                }
                ok.then_some(J::Object(o))
            }
            Y::Tagged(t) => self.substitute(r, path, &t.value, env),
            other => match yaml_to_json(other) {
                Ok(j) => Some(j),
                Err(message) => {
                    let pos = self.val_pos(r, path);
                    // A literal value (not a parameter): name the key it sits under.
                    let message = match path.last() {
                        Some(Seg::Key(k)) => format!("`{k}`: {message}"),
                        _ => message,
                    };
                    self.err(
                        r,
                        Problem::Yaml {
                            message,
                            suggestion: None,
                        },
                        pos,
                    );
                    None
                }
            },
        }
    }

    fn template(
        &mut self,
        r: usize,
        path: &[Seg],
        s: &str,
        env: &BTreeMap<String, Param>,
    ) -> Option<J> {
        if !s.contains("{{") {
            return Some(J::String(s.to_string()));
        }
        let mut out = String::new();
        let mut rest = s;
        let mut whole: Option<J> = None;
        let mut ok = true;
        while let Some(open) = rest.find("{{") {
            let Some(close) = rest[open..].find("}}") else {
                break;
            };
            let name = rest[open + 2..open + close].trim();
            out.push_str(&rest[..open]);
            match env.get(name) {
                Some(p) => {
                    if open == 0
                        && rest[open + close + 2..].is_empty()
                        && out.is_empty()
                        && s.trim() == rest.trim()
                    {
                        whole = Some(p.value.clone());
                    }
                    match &p.value {
                        J::String(t) => out.push_str(t),
                        other => out.push_str(&other.to_string()),
                    }
                }
                None => {
                    let suggestion = did_you_mean(name, env.keys().map(String::as_str));
                    let pos = self.val_pos(r, path);
                    self.err(
                        r,
                        Problem::UnknownParameter {
                            name: name.to_string(),
                            suggestion,
                        },
                        pos,
                    );
                    ok = false;
                }
            }
            rest = &rest[open + close + 2..];
        }
        out.push_str(rest);
        if !ok {
            return None;
        }
        Some(whole.unwrap_or(J::String(out)))
    }

    fn options(
        &mut self,
        r: usize,
        path: &[Seg],
        id: &str,
        stage: &'static dyn Stage,
        raw: Option<&Y>,
        env: &BTreeMap<String, Param>,
    ) -> J {
        let mut opath = path.to_vec();
        opath.push(k("options"));
        let json = match raw {
            None | Some(Y::Null) => J::Object(Default::default()),
            Some(y) => match self.substitute(r, &opath, y, env) {
                Some(j) => j,
                None => return J::Null,
            },
        };
        match stage.resolve_options(&json) {
            Ok(c) => c,
            Err(e) => {
                let mut epath = opath.clone();
                epath.extend(option_path(&e.path));
                let (pos, suggestion) = match &e.unknown_key {
                    Some(u) => {
                        let mut kp = epath.clone();
                        kp.push(Seg::Key(u.key.clone()));
                        (
                            self.key_pos(r, &kp),
                            did_you_mean(&u.key, u.expected.iter().map(String::as_str)),
                        )
                    }
                    None => (self.val_pos(r, &epath), None),
                };
                let problem = Problem::BadOption {
                    step: id.to_string(),
                    stage: stage.info().name.to_string(),
                    path: e.path.clone(),
                    message: e.message.clone(),
                    suggestion,
                };
                self.err(r, problem, pos);
                J::Null
            }
        }
    }

    #[allow(clippy::too_many_arguments)]
    fn connect(
        &mut self,
        r: usize,
        path: &[Seg],
        id: &str,
        stage: &'static dyn Stage,
        from: Option<&Y>,
        sets: &HashMap<String, usize>,
        by_id: &HashMap<String, usize>,
        kinds: &[Option<Kind>],
        all_sets: &[SampleSet],
    ) -> Vec<PortPlan> {
        let info = stage.info();
        let ports = info.inputs;
        let mut fpath = path.to_vec();
        fpath.push(k("from"));
        // (port index, names with their paths)
        let mut given: Vec<Option<Named>> = vec![None; ports.len()];
        let names_of = |y: &Y, p: &[Seg]| -> Option<Named> {
            match y {
                Y::String(s) => Some(vec![(s.clone(), p.to_vec())]),
                Y::Sequence(v) => v
                    .iter()
                    .enumerate()
                    .map(|(i, e)| {
                        let mut ep = p.to_vec();
                        ep.push(Seg::Index(i));
                        e.as_str().map(|s| (s.to_string(), ep))
                    })
                    .collect(),
                _ => None,
            }
        };
        let bad_from = |this: &mut Self| {
            let pos = this.val_pos(r, &fpath);
            this.err(
                r,
                Problem::BadFrom {
                    step: id.to_string(),
                },
                pos,
            );
        };
        match from {
            None | Some(Y::Null) => {}
            Some(Y::String(s)) => {
                if ports.is_empty() {
                    let pos = self.val_pos(r, &fpath);
                    self.err(
                        r,
                        Problem::TooManyInputs {
                            step: id.into(),
                            stage: info.name.into(),
                            given: 1,
                            ports: 0,
                        },
                        pos,
                    );
                } else {
                    given[0] = Some(vec![(s.clone(), fpath.clone())]);
                }
            }
            Some(Y::Sequence(v)) => {
                if ports.len() == 1 && ports[0].arity == Arity::Several {
                    match names_of(from.unwrap_or(&Y::Null), &fpath) {
                        Some(n) => given[0] = Some(n),
                        None => bad_from(self),
                    }
                } else if v.len() > ports.len() {
                    let pos = self.val_pos(r, &fpath);
                    self.err(
                        r,
                        Problem::TooManyInputs {
                            step: id.into(),
                            stage: info.name.into(),
                            given: v.len(),
                            ports: ports.len(),
                        },
                        pos,
                    );
                } else {
                    for (i, e) in v.iter().enumerate() {
                        let mut ep = fpath.clone();
                        ep.push(Seg::Index(i));
                        match names_of(e, &ep) {
                            Some(n) => given[i] = Some(n),
                            None => bad_from(self),
                        }
                    }
                }
            }
            Some(Y::Mapping(m)) => {
                for (key, e) in m {
                    let Some(key) = key.as_str() else {
                        bad_from(self);
                        continue;
                    };
                    let mut ep = fpath.clone();
                    ep.push(Seg::key(key));
                    match ports.iter().position(|p| p.name == key) {
                        None => {
                            let pos = self.key_pos(r, &ep);
                            let suggestion = did_you_mean(key, ports.iter().map(|p| p.name));
                            let problem = Problem::UnknownPort {
                                step: id.into(),
                                stage: info.name.into(),
                                port: key.into(),
                                ports: ports.iter().map(|p| p.name.to_string()).collect(),
                                suggestion,
                            };
                            self.err(r, problem, pos);
                        }
                        Some(pi) => match names_of(e, &ep) {
                            Some(n) => given[pi] = Some(n),
                            None => bad_from(self),
                        },
                    }
                }
            }
            Some(_) => bad_from(self),
        }
        let mut out = Vec::new();
        let mut missing_reported = false;
        for (pi, port) in ports.iter().enumerate() {
            let Some(names) = given[pi].take() else {
                if !port.optional && !missing_reported {
                    let pos = if from.is_some() {
                        self.val_pos(r, &fpath)
                    } else {
                        self.key_pos(r, path)
                    };
                    let problem = if from.is_none() {
                        Problem::NoInputs {
                            step: id.into(),
                            stage: info.name.into(),
                        }
                    } else {
                        Problem::MissingPort {
                            step: id.into(),
                            stage: info.name.into(),
                            port: port.name.into(),
                        }
                    };
                    self.err(r, problem, pos);
                    missing_reported = true;
                }
                out.push(PortPlan::Missing);
                continue;
            };
            if port.arity != Arity::Several && names.len() != 1 {
                bad_from(self);
                out.push(PortPlan::Missing);
                continue;
            }
            let mut srcs = Vec::new();
            for (name, npath) in &names {
                let local_id = format!("{}{name}", self.loaded[r].namespace);
                let src = if let Some(&d) = by_id.get(&local_id) {
                    Some((Src::Step(d), kinds[d]))
                } else if let Some(&si) = sets.get(name) {
                    Some((Src::Set(si), Some(Kind::File)))
                } else {
                    by_id.get(name).map(|&d| (Src::Step(d), kinds[d]))
                };
                let Some((src, kind)) = src else {
                    if self.failed_sets.contains(&(r, name.clone())) {
                        continue;
                    }
                    let ns = &self.loaded[r].namespace;
                    let mut candidates: Vec<String> = by_id
                        .keys()
                        .filter_map(|k| k.strip_prefix(ns.as_str()))
                        .map(str::to_string)
                        .collect();
                    candidates.extend(sets.keys().cloned());
                    candidates.extend(by_id.keys().cloned());
                    candidates.sort();
                    let suggestion = did_you_mean(name, candidates.iter().map(String::as_str));
                    let pos = self.val_pos(r, npath);
                    self.err(
                        r,
                        Problem::UnknownSource {
                            step: id.into(),
                            name: name.clone(),
                            suggestion,
                        },
                        pos,
                    );
                    continue;
                };
                if let Some(kind) = kind {
                    if !port.kind.accepts(kind) {
                        let pos = self.val_pos(r, npath);
                        let problem = Problem::KindMismatch {
                            step: id.into(),
                            port: port.name.into(),
                            expected: port.kind.name().into(),
                            source: match src {
                                Src::Set(si) => {
                                    all_sets.get(si).map(|s| s.name.clone()).unwrap_or_default()
                                }
                                Src::Step(_) => name.clone(),
                            },
                            given: kind.name().into(),
                        };
                        self.err(r, problem, pos);
                    }
                }
                srcs.push(src);
            }
            out.push(match (port.arity, srcs.len()) {
                (Arity::Several, _) => PortPlan::Several(srcs),
                (_, 0) => PortPlan::Missing,
                (Arity::Each, _) => PortPlan::One(srcs[0]),
                (Arity::Gather, _) => PortPlan::Gather(srcs[0]),
            });
        }
        out
    }

    /// Topological order of the declared steps (ties in declaration order); cycles
    /// are reported and their steps left out.
    fn order(&mut self, decls: &[Decl]) -> Vec<usize> {
        use petgraph::graph::{DiGraph, NodeIndex};
        let mut g: DiGraph<usize, ()> = DiGraph::new();
        let nodes: Vec<NodeIndex> = (0..decls.len()).map(|i| g.add_node(i)).collect();
        for (i, d) in decls.iter().enumerate() {
            for p in &d.ports {
                for s in port_sources(p) {
                    if let Src::Step(j) = s {
                        g.add_edge(nodes[j], nodes[i], ());
                    }
                }
            }
        }
        let mut in_cycle = vec![false; decls.len()];
        let mut sccs = petgraph::algo::tarjan_scc(&g);
        sccs.sort_by_key(|c| c.iter().map(|n| n.index()).min());
        for scc in sccs {
            let self_loop = scc.len() == 1 && g.contains_edge(scc[0], scc[0]);
            if scc.len() < 2 && !self_loop {
                continue;
            }
            let members: BTreeSet<usize> = scc.iter().map(|n| n.index()).collect();
            for &m in &members {
                in_cycle[m] = true;
            }
            // Walk forward from the first-declared member, always to the
            // first-declared successor inside the cycle, until we come back.
            let start = *members.iter().next().unwrap_or(&0);
            let mut path = vec![start];
            let mut cur = start;
            loop {
                let mut next: Vec<usize> = g
                    .neighbors(nodes[cur])
                    .map(|n| n.index())
                    .filter(|n| members.contains(n))
                    .collect();
                next.sort();
                let Some(&n) = next
                    .iter()
                    .find(|n| **n == start || !path.contains(n))
                    .or(next.first())
                else {
                    break;
                };
                path.push(n);
                if n == start || path.len() > members.len() + 1 {
                    break;
                }
                cur = n;
            }
            let names: Vec<String> = path.iter().map(|&i| decls[i].local.clone()).collect();
            let d = &decls[start];
            let pos = self.val_pos(
                d.recipe,
                &[k("steps"), Seg::Key(d.local.clone()), k("from")],
            );
            self.err(d.recipe, Problem::Cycle { path: names }, pos);
        }
        let mut indeg = vec![0usize; decls.len()];
        for e in g.edge_indices() {
            if let Some((a, b)) = g.edge_endpoints(e) {
                if !in_cycle[a.index()] {
                    indeg[b.index()] += 1;
                } else {
                    indeg[b.index()] += 1_000_000;
                }
            }
        }
        let mut heap: BinaryHeap<std::cmp::Reverse<usize>> = (0..decls.len())
            .filter(|&i| indeg[i] == 0)
            .map(std::cmp::Reverse)
            .collect();
        let mut order = Vec::new();
        while let Some(std::cmp::Reverse(i)) = heap.pop() {
            order.push(i);
            for n in g.neighbors(nodes[i]) {
                let j = n.index();
                indeg[j] = indeg[j].saturating_sub(1);
                if indeg[j] == 0 && !in_cycle[j] {
                    heap.push(std::cmp::Reverse(j));
                }
            }
        }
        order
    }

    fn domain(
        &mut self,
        decl: &Decl,
        ports: &[PortPlan],
        steps: &[PlanStep],
        sets: &[SampleSet],
    ) -> Option<Vec<String>> {
        let dom = |s: &Src| -> Option<Vec<String>> {
            match s {
                Src::Set(i) => Some(sets[*i].files.iter().map(|f| f.item.clone()).collect()),
                Src::Step(i) => steps.get(*i).and_then(|st| st.domain.clone()),
            }
        };
        let mut domains: Vec<Vec<String>> = Vec::new();
        for p in ports {
            match p {
                PortPlan::One(s) => domains.extend(dom(s)),
                PortPlan::Several(v) => domains.extend(v.iter().filter_map(dom)),
                PortPlan::Gather(_) | PortPlan::Missing => {}
            }
        }
        let first = domains.first()?.clone();
        let inter: Vec<String> = first
            .iter()
            .filter(|i| domains.iter().all(|d| d.contains(i)))
            .cloned()
            .collect();
        let union: BTreeSet<&String> = domains.iter().flatten().collect();
        if union.len() != inter.len() {
            let dropped: Vec<String> = union
                .into_iter()
                .filter(|i| !inter.contains(i))
                .cloned()
                .collect();
            let pos = self.val_pos(
                decl.recipe,
                &[k("steps"), Seg::Key(decl.local.clone()), k("from")],
            );
            self.warn(
                decl.recipe,
                Problem::ItemsDropped {
                    step: decl.id.clone(),
                    items: dropped,
                },
                pos,
            );
        }
        Some(inter)
    }

    fn sample_set(
        &mut self,
        r: usize,
        name: &str,
        spec: &Y,
        env: &BTreeMap<String, Param>,
    ) -> Option<Vec<SampleFile>> {
        let l = &self.loaded[r];
        let path = vec![k("samples"), Seg::key(name)];
        if !valid_id(name) {
            let pos = self.key_pos(r, &path);
            self.err(
                r,
                Problem::BadId {
                    what: "sample set name",
                    id: name.to_string(),
                },
                pos,
            );
        }
        let (glob_y, gpath, regex) = match spec {
            Y::String(_) => (spec.clone(), path.clone(), None),
            Y::Mapping(m) => {
                let mut files = None;
                let mut item = None;
                for (key, v) in m {
                    match (key.as_str(), v) {
                        (Some("files"), v) => files = Some(v.clone()),
                        (Some("item"), Y::String(s)) => item = Some(s.clone()),
                        _ => {
                            self.bad_set(r, name, &path, SET_SHAPE);
                            return None;
                        }
                    }
                }
                let Some(files) = files else {
                    self.bad_set(r, name, &path, "`files: pattern` is missing");
                    return None;
                };
                let mut gp = path.clone();
                gp.push(k("files"));
                (files, gp, item)
            }
            _ => {
                self.bad_set(r, name, &path, SET_SHAPE);
                return None;
            }
        };
        let pattern = match self.substitute(r, &gpath, &glob_y, env)? {
            J::String(s) => s,
            _ => {
                self.bad_set(r, name, &gpath, "the file pattern must be text");
                return None;
            }
        };
        let gpos = self.val_pos(r, &gpath);
        if !self.policy.written_ok(&l.dir, &pattern) {
            self.err(r, Problem::OutsideTree { path: pattern }, gpos);
            return None;
        }
        let re = match regex.as_deref().map(regex::Regex::new) {
            Some(Ok(re)) => Some(re),
            Some(Err(e)) => {
                let mut ip = path.clone();
                ip.push(k("item"));
                let pos = self.val_pos(r, &ip);
                self.err(
                    r,
                    Problem::BadItemRegex {
                        set: name.into(),
                        regex: regex.unwrap_or_default(),
                        message: e.to_string(),
                    },
                    pos,
                );
                return None;
            }
            None => None,
        };
        let full = format!(
            "{}/{}",
            glob::Pattern::escape(&l.dir.to_string_lossy()),
            pattern
        );
        let paths = match glob::glob(&full) {
            Ok(p) => p,
            Err(e) => {
                self.err(
                    r,
                    Problem::BadGlob {
                        set: name.into(),
                        glob: pattern,
                        message: e.msg.to_string(),
                    },
                    gpos,
                );
                return None;
            }
        };
        let mut files: Vec<SampleFile> = Vec::new();
        let mut ok = true;
        for p in paths.flatten() {
            if !p.is_file() {
                continue;
            }
            let canonical = match p.canonicalize() {
                Ok(c) => c,
                Err(_) => continue,
            };
            let shown = self.policy.shown(&canonical);
            if !self.policy.permits(&canonical) {
                self.err(
                    r,
                    Problem::OutsideTree {
                        path: p.display().to_string(),
                    },
                    gpos,
                );
                ok = false;
                continue;
            }
            let file_name = p
                .file_name()
                .map(|f| f.to_string_lossy().to_string())
                .unwrap_or_default();
            let item = match &re {
                Some(re) => match re.captures(&file_name).and_then(|c| c.get(1).or(c.get(0))) {
                    Some(m) if !m.as_str().is_empty() => m.as_str().to_string(),
                    _ => {
                        let mut ip = path.clone();
                        ip.push(k("item"));
                        let pos = self.val_pos(r, &ip);
                        self.err(
                            r,
                            Problem::NoItemName {
                                set: name.into(),
                                file: shown,
                                regex: re.as_str().into(),
                            },
                            pos,
                        );
                        ok = false;
                        continue;
                    }
                },
                None => p
                    .file_stem()
                    .map(|f| f.to_string_lossy().to_string())
                    .unwrap_or_default(),
            };
            if let Some(prev) = files.iter().find(|f| f.item == item) {
                let problem = Problem::DuplicateItem {
                    set: name.into(),
                    item: item.clone(),
                    first: prev.shown.clone(),
                    second: shown.clone(),
                };
                self.err(r, problem, gpos);
                ok = false;
                continue;
            }
            files.push(SampleFile {
                item,
                path: canonical,
                shown,
            });
        }
        if files.is_empty() && ok {
            let problem = if pattern.contains(['*', '?', '[']) {
                Problem::EmptyGlob {
                    set: name.into(),
                    glob: pattern,
                }
            } else {
                Problem::MissingFile {
                    set: name.into(),
                    path: pattern,
                }
            };
            self.err(r, problem, gpos);
            return None;
        }
        files.sort_by(|a, b| a.item.cmp(&b.item));
        ok.then_some(files)
    }

    fn checks(
        &mut self,
        steps: &[PlanStep],
        new_index: &[usize],
        by_id: &HashMap<String, usize>,
        envs: &[BTreeMap<String, Param>],
    ) -> Vec<PlanCheck> {
        let mut out = Vec::new();
        let loaded = self.loaded;
        for (r, l) in loaded.iter().enumerate() {
            for (ci, c) in l.raw.checks.iter().enumerate() {
                let path = [k("checks"), Seg::Index(ci)];
                let rpos = self.val_pos(r, &[k("checks"), Seg::Index(ci), k("result")]);
                let Some((step_name, name)) = c.result.split_once('.') else {
                    self.err(
                        r,
                        Problem::BadCheck {
                            message: format!("`result` is `step.result_name`, got `{}`", c.result),
                        },
                        rpos,
                    );
                    continue;
                };
                let local = format!("{}{step_name}", l.namespace);
                let Some(&d) = by_id.get(&local).or_else(|| by_id.get(step_name)) else {
                    let ns = &l.namespace;
                    let cands: Vec<&str> = by_id
                        .keys()
                        .filter_map(|k| k.strip_prefix(ns.as_str()))
                        .collect();
                    let suggestion = did_you_mean(step_name, cands);
                    self.err(
                        r,
                        Problem::UnknownCheckStep {
                            step: step_name.into(),
                            suggestion,
                        },
                        rpos,
                    );
                    continue;
                };
                let si = new_index.get(d).copied().unwrap_or(usize::MAX);
                let Some(step) = steps.get(si) else { continue };
                if let (Some(item), Some(domain)) = (&c.item, &step.domain) {
                    if !domain.contains(item) {
                        let ipos = self.val_pos(r, &[k("checks"), Seg::Index(ci), k("item")]);
                        let suggestion = did_you_mean(item, domain.iter().map(String::as_str));
                        self.err(
                            r,
                            Problem::UnknownCheckItem {
                                step: step.id.clone(),
                                item: item.clone(),
                                suggestion,
                            },
                            ipos,
                        );
                        continue;
                    }
                }
                if c.item.is_none() && step.domain.is_some() {
                    let pos = self.val_pos(r, &path);
                    self.err(
                        r,
                        Problem::BadCheck {
                            message: format!(
                                "step `{}` runs once per item: name the `item` to check",
                                step.id
                            ),
                        },
                        pos,
                    );
                    continue;
                }
                // Numbers, or `{{ parameter }}` templates that give numbers.
                let env = &envs[r];
                let mut number = |field: &str, y: &Option<Y>| -> Result<Option<f64>, ()> {
                    let Some(y) = y else { return Ok(None) };
                    let at = [k("checks"), Seg::Index(ci), k(field)];
                    self.check_number(r, &at, y, env).map(Some).ok_or(())
                };
                let (Ok(value), Ok(tolerance)) = (
                    number("expect", &c.expect),
                    number("tolerance", &c.tolerance),
                ) else {
                    continue;
                };
                let within = match &c.within {
                    None => None,
                    Some(Y::Sequence(v)) if v.len() == 2 => {
                        let at = |i| [k("checks"), Seg::Index(ci), k("within"), Seg::Index(i)];
                        let low = self.check_number(r, &at(0), &v[0], env);
                        let high = self.check_number(r, &at(1), &v[1], env);
                        match (low, high) {
                            (Some(low), Some(high)) => Some([low, high]),
                            _ => continue,
                        }
                    }
                    Some(_) => {
                        let pos = self.val_pos(r, &[k("checks"), Seg::Index(ci), k("within")]);
                        let message = "`within` is `[low, high]`: two numbers".to_string();
                        self.err(r, Problem::BadCheck { message }, pos);
                        continue;
                    }
                };
                let expect = match (value, tolerance, within) {
                    (Some(value), Some(tolerance), None) if tolerance >= 0.0 => {
                        Expect::Near { value, tolerance }
                    }
                    (None, None, Some([low, high])) if low <= high => Expect::Within { low, high },
                    _ => {
                        let pos = self.val_pos(r, &path);
                        let message = "give either `expect` with a non-negative `tolerance`, or `within: [low, high]`".to_string();
                        self.err(r, Problem::BadCheck { message }, pos);
                        continue;
                    }
                };
                out.push(PlanCheck {
                    recipe: r,
                    result: c.result.clone(),
                    step: si,
                    name: name.to_string(),
                    item: c.item.clone(),
                    expect,
                });
            }
        }
        out
    }

    /// A check's number: a YAML number, or a template giving one.
    fn check_number(
        &mut self,
        r: usize,
        path: &[Seg],
        y: &Y,
        env: &BTreeMap<String, Param>,
    ) -> Option<f64> {
        let j = self.substitute(r, path, y, env)?;
        let v = match &j {
            J::Number(n) => n.as_f64(),
            J::String(s) => s.trim().parse::<f64>().ok(),
            _ => None,
        };
        match v.filter(|v| v.is_finite()) {
            Some(v) => Some(v),
            None => {
                let pos = self.val_pos(r, path);
                let shown = match &j {
                    J::String(s) => format!("`{s}`"),
                    other => other.to_string(),
                };
                let message = format!("expected a number, found {shown}");
                self.err(r, Problem::BadCheck { message }, pos);
                None
            }
        }
    }
}

/// What a sample set may look like, for its errors.
const SET_SHAPE: &str = "a sample set is a file pattern, or { files: pattern, item: regex }";

/// Names given to one port, each with its path in the recipe.
type Named = Vec<(String, Vec<Seg>)>;

fn port_sources(p: &PortPlan) -> Vec<Src> {
    match p {
        PortPlan::Missing => Vec::new(),
        PortPlan::One(s) | PortPlan::Gather(s) => vec![*s],
        PortPlan::Several(v) => v.clone(),
    }
}

/// Step ids, set and parameter names: letters, digits, `_`, `-`.
fn valid_id(s: &str) -> bool {
    !s.is_empty()
        && s.chars()
            .all(|c| c.is_ascii_alphanumeric() || c == '_' || c == '-')
}

/// `peaks.cc.fwhm[0]` as path segments.
fn option_path(p: &str) -> Vec<Seg> {
    let mut out = Vec::new();
    for part in p.split('.').filter(|s| !s.is_empty()) {
        let mut rest = part;
        if let Some(i) = rest.find('[') {
            if i > 0 {
                out.push(Seg::key(&rest[..i]));
            }
            rest = &rest[i..];
            for idx in rest.split('[').filter(|s| !s.is_empty()) {
                if let Ok(n) = idx.trim_end_matches(']').parse() {
                    out.push(Seg::Index(n));
                }
            }
        } else {
            out.push(Seg::key(rest));
        }
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    proptest::proptest! {
        #![proptest_config(proptest::prelude::ProptestConfig::with_cases(64))]
        /// Phase one never panics, whatever the text: it gives a plan or diagnostics.
        #[test]
        fn phase_one_never_panics(body in "(steps|samples|from|stage|options|id|x|\\{\\{ p \\}\\}|[:{}\\[\\], \n-]){0,60}") {
            let t = tempfile::tempdir().unwrap();
            let path = t.path().join("r.yaml");
            std::fs::write(&path, format!("id: r\n{body}")).unwrap();
            let p1 = build(&path, &["p=1".to_string()], false, stages::CATALOG);
            let text = p1.render_diagnostics();
            proptest::prop_assert!(p1.plan.is_some() || text.contains("error"));
        }
    }
}
