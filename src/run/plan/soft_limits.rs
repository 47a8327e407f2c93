//! The soft-limit verdict of a plan in one message: how many sites break which bound, the
//! worst by how far, and the fix (where the wafer centre could go, or the travel needed).

use super::Plan;
use crate::bench::limits::SiteOutside;

/// `None` when every site and approach point lies inside the travel box less the margin.
pub fn verdict(plan: &Plan) -> Option<String> {
    let outside: Vec<&SiteOutside> = plan.sites().filter_map(|s| s.outside.as_ref()).collect();
    let worst = outside
        .iter()
        .max_by(|a, b| excess(a).total_cmp(&excess(b)))?;
    let total = plan.sites().count();
    let st = &plan.machine.stage;
    let mut msg = format!(
        "{} of {total} sites lie outside the soft limits of machine {}; nothing was sent. \
         The farthest: {}, {:.3} mm beyond the limit.",
        outside.len(),
        plan.machine.name,
        worst,
        excess(worst)
    );
    // Where could the chuck centre go so that every commanded point fits? The points move
    // rigidly with the centre, so each axis gives an interval.
    let c = plan.machine.chuck.center_mm;
    let extent = |axis: usize| -> [f64; 2] {
        let pts = plan.sites().flat_map(|s| {
            let approach = s.legs.iter().copied().chain(std::iter::once(s.stage_mm));
            approach.map(move |p| p[axis])
        });
        pts.fold([f64::INFINITY, f64::NEG_INFINITY], |acc, v| {
            [acc[0].min(v - c[axis]), acc[1].max(v - c[axis])]
        })
    };
    let allowed = |t: [f64; 2]| [t[0] + st.margin_mm, t[1] - st.margin_mm];
    let (ex, ey) = (extent(0), extent(1));
    let (ax, ay) = (allowed(st.travel_x_mm), allowed(st.travel_y_mm));
    let need = [ex[1] - ex[0], ey[1] - ey[0]];
    let room = [ax[1] - ax[0], ay[1] - ay[0]];
    if need[0] <= room[0] && need[1] <= room[1] {
        let fit = |a: [f64; 2], e: [f64; 2], now: f64| (a[0] - e[0]).max(now.min(a[1] - e[1]));
        msg.push_str(&format!(
            " Fix: set [chuck] center_mm to where the wafer sits on the stage; every site fits \
             with the centre at x in [{:.1}, {:.1}] and y in [{:.1}, {:.1}] mm (now [{}, {}]; \
             nearest that fits: [{:.1}, {:.1}]).",
            ax[0] - ex[0],
            ax[1] - ex[1],
            ay[0] - ey[0],
            ay[1] - ey[1],
            c[0],
            c[1],
            fit(ax, ex, c[0]),
            fit(ay, ey, c[1]),
        ));
    } else {
        msg.push_str(&format!(
            " Fix: the sites span {:.1} × {:.1} mm of stage travel but travel_x_mm/travel_y_mm \
             less margin_mm leave {:.1} × {:.1} mm: widen the travel in [stage] if the stage \
             really has it, or measure a smaller pattern.",
            need[0],
            need[1],
            room[0].max(0.0),
            room[1].max(0.0)
        ));
    }
    Some(msg)
}

/// How far a point lies beyond the bound it breaks, mm.
fn excess(o: &SiteOutside) -> f64 {
    let v = &o.violation;
    let d = if v.value_mm < v.allowed_mm[0] {
        v.allowed_mm[0] - v.value_mm
    } else {
        v.value_mm - v.allowed_mm[1]
    };
    // A NaN coordinate is as far out as it gets.
    if d.is_nan() {
        f64::INFINITY
    } else {
        d
    }
}

#[cfg(test)]
mod tests {
    use crate::bench::machine::builtin_simulated;
    use crate::run::plan::Plan;

    fn recipe() -> crate::recipe::LoadedRecipe {
        crate::recipe::load(std::path::Path::new(concat!(
            env!("CARGO_MANIFEST_DIR"),
            "/recipes/oxide-150-49.toml"
        )))
        .unwrap()
    }

    #[test]
    fn off_centre_chuck_is_one_message_with_the_centre_that_fits() {
        let mut m = builtin_simulated();
        m.chuck.center_mm[0] += 200.0;
        let p = Plan::new(&recipe(), Some(&m)).unwrap();
        let msg = p
            .limit_problem()
            .expect("the shifted wafer leaves the travel");
        assert_eq!(msg.matches("sites lie outside").count(), 1, "{msg}");
        assert!(msg.contains("[chuck] center_mm"), "{msg}");
        assert!(msg.contains("mm beyond the limit"), "{msg}");
        // Putting the centre where the message says makes the plan valid.
        m.chuck.center_mm[0] -= 200.0;
        assert!(Plan::new(&recipe(), Some(&m)).unwrap().checked().is_ok());
    }

    #[test]
    fn travel_smaller_than_the_wafer_says_so() {
        let mut m = builtin_simulated();
        m.stage.travel_x_mm = [0.0, 20.0];
        m.stage.travel_y_mm = [0.0, 20.0];
        m.chuck.center_mm = [10.0, 10.0];
        let msg = Plan::new(&recipe(), Some(&m))
            .unwrap()
            .limit_problem()
            .unwrap();
        assert!(msg.contains("widen the travel"), "{msg}");
        assert!(
            msg.starts_with("48 of 49 sites"),
            "the centre site fits: {msg}"
        );
    }
}
