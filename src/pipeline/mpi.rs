//! MPI runs (cargo feature `mpi`): rank r of P counts job shard (r, P) exactly as
//! `ringscale run --shard r/P` would, all ranks agree that every shard succeeded, and rank 0
//! merges the parts and finishes the later stages. The parts travel through the shared output
//! folder (cluster file systems are shared), which also makes an MPI run resumable: a rerun
//! with any number of ranks reuses every finished part.
use super::log::Logger;
use super::{execute, Plan, RunOptions, RunSummary};
use crate::{Error, Result};
use mpi::collective::SystemOperation;
use mpi::traits::*;

pub fn run(plan: &Plan, opt: &RunOptions, log: &Logger) -> Result<Option<RunSummary>> {
    let universe = mpi::initialize()
        .ok_or_else(|| Error::other("MPI could not be initialised (already initialised?)"))?;
    let world = universe.world();
    let rank = world.rank() as usize;
    let size = world.size() as usize;
    log.event(
        "mpi",
        "start",
        &format!("rank {rank} of {size}"),
        serde_json::json!({"rank": rank, "size": size}),
    );
    let shard_opt = RunOptions {
        shard: Some((rank, size)),
        merge_only: false,
        ..opt.clone()
    };
    let result = execute(plan, &shard_opt, log);
    // Every rank must know whether all shards succeeded before rank 0 merges.
    let ok: i32 = i32::from(result.is_ok());
    let mut all_ok: i32 = 0;
    world.all_reduce_into(&ok, &mut all_ok, SystemOperation::min());
    if let Err(e) = result {
        return Err(e);
    }
    if all_ok == 0 {
        return Err(Error::other(format!(
            "rank {rank}: another MPI rank failed (see its log); nothing merged"
        )));
    }
    if rank != 0 {
        return Ok(None);
    }
    let finish = RunOptions {
        shard: None,
        merge_only: true,
        ..opt.clone()
    };
    execute(plan, &finish, log).map(Some)
}
