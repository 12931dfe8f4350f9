//! The results table: printed as aligned text and written as JSON (`--json FILE`).

use serde::Serialize;

/// One measured figure, with its goal when the issue sets one.
#[derive(Serialize)]
pub struct Row {
    pub workload: String,
    pub metric: String,
    pub value: f64,
    pub unit: String,
    /// `(">=", 200.0)`: the figure must be at least 200; `("<", 0.2)`: under 0.2.
    pub goal: Option<(String, f64)>,
    pub met: Option<bool>,
    pub note: String,
}

#[derive(Default, Serialize)]
pub struct Table {
    pub rows: Vec<Row>,
}

impl Table {
    pub fn row(
        &mut self,
        workload: &str,
        metric: &str,
        value: f64,
        unit: &str,
        goal: Option<(&str, f64)>,
        note: &str,
    ) {
        let met = goal.map(|(op, g)| match op {
            ">=" => value >= g,
            "<" => value < g,
            "<=" => value <= g,
            _ => false,
        });
        let r = Row {
            workload: workload.into(),
            metric: metric.into(),
            value,
            unit: unit.into(),
            goal: goal.map(|(op, g)| (op.to_string(), g)),
            met,
            note: note.into(),
        };
        println!("{}", line(&r));
        self.rows.push(r);
    }

    pub fn print(&self) {
        println!(
            "\n{:<22} {:<42} {:>12} {:<15} {:<10} note",
            "workload", "metric", "value", "unit", "goal"
        );
        for r in &self.rows {
            println!("{}", line(r));
        }
    }
}

fn line(r: &Row) -> String {
    let goal = match (&r.goal, r.met) {
        (Some((op, g)), Some(m)) => format!("{op}{g} {}", if m { "met" } else { "NOT met" }),
        _ => String::new(),
    };
    format!(
        "{:<22} {:<42} {:>12} {:<15} {:<10} {}",
        r.workload,
        r.metric,
        fmt(r.value),
        r.unit,
        goal,
        r.note
    )
}

fn fmt(v: f64) -> String {
    let a = v.abs();
    if a == 0.0 {
        "0".into()
    } else if a >= 100.0 {
        format!("{v:.1}")
    } else if a >= 0.01 {
        format!("{v:.3}")
    } else {
        format!("{v:.3e}")
    }
}
