use cavern_evolve::steady::{self, LuStrategy, DirectOptions};
use cavern_evolve::Par;
use cavern_model::{CouplingForm, ModeParams, Network, SiteParams};
use std::time::Instant;

fn main() {
    let args: Vec<String> = std::env::args().collect();
    let sites: usize = args[1].parse().unwrap();
    let levels: usize = args[2].parse().unwrap();
    let ord = match args[3].as_str() {
        "mf" => LuStrategy::Multifrontal,
        _ => LuStrategy::PartialPivoting,
    };
    let par = if args[4] == "seq" { Par::Seq } else { Par::Rayon };
    let tau = 2.0 * std::f64::consts::PI;
    let g = [0.30, 0.25, 0.30, 0.25, 0.30, 0.25];
    let net = Network {
        sites: (0..sites)
            .map(|i| SiteParams {
                detuning: tau * if i % 2 == 0 { 0.05 } else { -0.05 },
                decay: tau * 0.02,
                dephasing: tau * 0.01,
                ..Default::default()
            })
            .collect(),
        modes: vec![ModeParams {
            levels,
            detuning: tau * 0.5,
            loss: tau * 0.8,
            drive: tau * 0.6,
            ..Default::default()
        }],
        coupling: (0..sites).map(|i| vec![tau * g[i]]).collect(),
        coupling_form: CouplingForm::Exchange,
        ..Network::empty()
    };
    let me = net.build().unwrap();
    let t0 = Instant::now();
    let opts = DirectOptions { strategy: ord, par, ..Default::default() };
    let s = steady::steady_state_direct(&me, 0.0, &opts).unwrap();
    let f = s.factor.unwrap();
    println!(
        "d {} n {} total {:.3}s analyse {:.3}s factor {:.3}s nnzA {} bound {} bytes {:.1} MB rcond {:.2e} relres {:.2e} {:?} mult {:.1e} refine {} notes {:?}",
        me.space.dim(), f.n, t0.elapsed().as_secs_f64(), f.analyse_seconds, f.factor_seconds, f.nnz_matrix, f.nnz_l, f.bytes as f64 / 1e6, f.rcond, s.relative_residual, f.strategy, f.max_multiplier, f.refinement_steps, s.fallbacks
    );
}
