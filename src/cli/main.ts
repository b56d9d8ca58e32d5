/** The `fringe` command line: one sub-command per job, errors as one sentence on stderr. */
import { ConfigError } from '../config/validation.ts';
import { JournalError } from '../journal/journal-reader.ts';
import { JournalWriteError } from '../journal/journal-writer.ts';
import { OpticalModelError } from '../model/optics/optical-model.ts';
import { describeRefusedPath, FolderError } from '../files/writable-folder.ts';
import { CliError } from './cli-error.ts';
import { processIo, type CommandIo } from './command-io.ts';
import { materialsUsage, runMaterials } from './commands/materials.ts';
import { calibrateUsage, runCalibrate } from './commands/calibrate.ts';
import { planUsage, runPlan } from './commands/plan.ts';
import { demoUsage, runDemo } from './commands/demo.ts';
import { exportUsage, runExport } from './commands/export.ts';
import { floorUsage, runFloor } from './commands/floor.ts';
import { replayUsage, runReplay } from './commands/replay.ts';
import { reportUsage, runReport } from './commands/report.ts';
import { runLive, runUsage } from './commands/run.ts';
import { runSimulate, simulateUsage } from './commands/simulate.ts';
import { runSpectrum, spectrumUsage } from './commands/spectrum.ts';
import { runStudyCommand, studyUsage } from './commands/study.ts';
import { runTooling, toolingUsage } from './commands/tooling.ts';
import { runWhatIfCommand, whatifUsage } from './commands/whatif.ts';

const commands: Record<string, { run: (argv: string[], io: CommandIo) => number | Promise<number>; usage: string }> = {
  spectrum: { run: runSpectrum, usage: spectrumUsage },
  plan: { run: runPlan, usage: planUsage },
  simulate: { run: runSimulate, usage: simulateUsage },
  run: { run: runLive, usage: runUsage },
  replay: { run: runReplay, usage: replayUsage },
  export: { run: runExport, usage: exportUsage },
  report: { run: runReport, usage: reportUsage },
  study: { run: runStudyCommand, usage: studyUsage },
  demo: { run: runDemo, usage: demoUsage },
  tooling: { run: runTooling, usage: toolingUsage },
  materials: { run: runMaterials, usage: materialsUsage },
  calibrate: { run: runCalibrate, usage: calibrateUsage },
  whatif: { run: runWhatIfCommand, usage: whatifUsage },
  floor: { run: runFloor, usage: floorUsage },
};

const usage = `fringe: live monitoring and layer cutting for optical coating runs.

Usage: fringe COMMAND [options]   (fringe COMMAND --help for each)

Commands:
  spectrum DESIGN     R, T and A of a design over wavelength
  plan RECIPE         what every monitor signal should do, layer by layer, and how precisely each layer can be cut
  simulate RECIPE     a whole run on the virtual chamber with fringe cutting every layer
  run --chamber F R   a live run on the chamber's instruments (--resume RUN after a crash)
  replay RUN          a recorded run through the controller again, cut by cut
  export RUN --csv    a run's readings and events as CSV
  report RUN          one self-contained HTML page of a run, to open, print or send
  study RECIPE        many seeded simulated runs per cut strategy: errors against the plan's precision
  demo                a simulated run with the live dashboard on http://127.0.0.1:7300
  tooling             a corrected tooling factor from a calibration run
  materials [NAME]    the material library: range, dispersion, sources; --plot of n and k
  calibrate RUN       the chamber's chip ratios, tooling factors and film indices from finished runs
  whatif RUN          another recipe or strategy, run many times on the chamber RUN's calibration describes
  floor --mqtt URL    every chamber's run on one read-only page, from the plant's broker

fringe is process control, not a safety system: interlocks, manual shutter controls and the
equipment maker's instructions stay in charge.
`;

export async function main(argv: string[], io: CommandIo = processIo): Promise<number> {
  const [name, ...rest] = argv;
  if (name === undefined || name === '--help' || name === '-h' || name === 'help') {
    io.out(usage);
    return name === undefined ? 2 : 0;
  }
  const command = commands[name];
  if (!command) {
    io.err(`fringe: unknown command "${name}"; the commands are ${Object.keys(commands).join(', ')}`);
    return 2;
  }
  try {
    return await command.run(rest, io);
  } catch (error) {
    if (error instanceof CliError) {
      io.err(`fringe ${name}: ${error.message}`);
      return error.exitCode;
    }
    if (error instanceof ConfigError || error instanceof OpticalModelError || error instanceof JournalError || error instanceof JournalWriteError) {
      io.err(`fringe ${name}: ${error.message}`);
      return 1;
    }
    if (error instanceof FolderError) {
      io.err(`fringe ${name}: ${error.message}`);
      return 1;
    }
    // A path the user gave that the file system refuses is their input, not our bug: one
    // sentence naming it. Anything else is a bug and keeps its trace.
    const refused = describeRefusedPath(error);
    if (refused !== undefined) {
      io.err(`fringe ${name}: ${refused}`);
      return 1;
    }
    if (error instanceof TypeError && 'code' in error && String(error.code).startsWith('ERR_PARSE_ARGS')) {
      // Node's own wording can run over several lines: keep its first sentence.
      io.err(`fringe ${name}: ${error.message.split('\n')[0] ?? ''} (see fringe ${name} --help)`);
      return 2;
    }
    throw error;
  }
}

