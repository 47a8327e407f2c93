//! Rules that need both files: what the machine file names must exist in the recipe's world.
//!
//! Called when a recipe meets a bench (`check --machine`, the run plan), before any folder or
//! port is opened. Problems are located in the machine file, where the fix goes.

use super::{builtin_loaded, LoadedMachine, MachineFile};
use crate::recipe::validate::known_materials;
use crate::recipe::Recipe;
use crate::tomlcheck::{self, nearest, Located, Problem};

/// Problems of `machine` used with `recipe`, with key paths in the machine file.
pub fn pair_problems(recipe: &Recipe, machine: &MachineFile) -> Vec<Problem> {
    let mut problems = Vec::new();
    let known = known_materials(recipe);
    let name = machine.reference.material.as_str();
    if !name.trim().is_empty() && !known.iter().any(|k| k == name) {
        let hint = nearest(name, &known)
            .map(|n| format!("; did you mean \"{n}\"?"))
            .unwrap_or_default();
        problems.push(Problem::at(
            "reference.material",
            format!(
                "unknown reference material \"{name}\"{hint} (known: built-ins and the recipe's own: {})",
                known.join(", ")
            ),
        ));
    }
    problems
}

/// [`pair_problems`] located in the machine file (the built-in bench when `machine` is None).
pub fn check_pair(recipe: &Recipe, machine: Option<&LoadedMachine>) -> Result<(), Vec<Located>> {
    let builtin;
    let m = match machine {
        Some(m) => m,
        None => {
            builtin = builtin_loaded();
            &builtin
        }
    };
    let located: Vec<Located> = pair_problems(recipe, &m.machine)
        .iter()
        .map(|p| tomlcheck::place(&m.text, &m.path, p))
        .collect();
    if located.is_empty() {
        Ok(())
    } else {
        Err(located)
    }
}
