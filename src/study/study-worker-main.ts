/** A study worker thread: runs the seeds it is sent and posts each result back. */
import { parentPort, workerData } from 'node:worker_threads';
import type { SimProfile } from '../../sim/index.ts';
import type { ResolvedRecipe } from '../model/plan/recipe.ts';
import { runOne } from './study-run.ts';

interface Job {
  recipe: ResolvedRecipe;
  profile: SimProfile;
  tasks: { strategy: string; seed: number }[];
}

const job = workerData as Job;
for (const task of job.tasks) {
  try {
    parentPort?.postMessage({ ok: true, result: runOne(job.recipe, job.profile, task.strategy, task.seed) });
  } catch (error) {
    parentPort?.postMessage({ ok: false, message: (error as Error).message, task });
  }
}
