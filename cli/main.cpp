// `spinfer`: the command-line front end. Parses arguments, runs one subcommand, maps library
// exceptions to the documented exit codes. All numerical work happens in the library.
// Built with -DSPINFER_MPI=ON and started by an MPI launcher, every rank runs this same main; an
// error on any rank ends the whole job with the documented exit code (MPI_Abort).
#include <csignal>
#include <iostream>
#include <string>

#include "checkpoint.hpp"
#include "commands.hpp"
#include "spinfer/errors.hpp"
#include "spinfer/version.hpp"
#ifdef SPINFER_WITH_MPI
#include "mpi_session.hpp"
#endif

namespace {

// run()'s answer on a rank other than 0 that rank 0 has stopped (MPI builds only).
constexpr int kAwaitRootAbort = -1;

// "spinfer: " alone, or naming the rank in a job of several.
std::string prefix(const spinfer::cli::Context& ctx) {
  if (ctx.ranks() == 1) return "spinfer: ";
  return "spinfer (rank " + std::to_string(ctx.team->rank()) + " of " +
         std::to_string(ctx.ranks()) + "): ";
}

// Only these divide their work over MPI ranks; any other command would be repeated by every rank.
bool runs_on_ranks(const CLI::App& app) {
  for (const CLI::App* sub : app.get_subcommands())
    if (sub->get_name() == "fit" || sub->get_name() == "sample") return true;
  return false;
}

int run(int argc, char** argv, const spinfer::Team& team, const std::string& mpi_info) {
  using namespace spinfer::cli;
  CLI::App app{"spinfer: pairwise maximum-entropy (inverse Ising) networks from binary recordings"};
  app.require_subcommand(1);
  app.set_version_flag("--version", [&mpi_info] {
    return "spinfer " + spinfer::version() + "\n" + spinfer::build_info() + mpi_info;
  });
  Context ctx;
  ctx.argv.assign(argv, argv + argc);
  ctx.team = &team;
  add_stats_command(app, ctx);
  add_bin_command(app, ctx);
  add_convert_command(app, ctx);
  add_fit_command(app, ctx);
  add_sample_command(app, ctx);
  add_check_command(app, ctx);
  add_scan_command(app, ctx);
  add_refine_command(app, ctx);
  add_significance_command(app, ctx);
  add_merge_command(app, ctx);
  add_report_command(app, ctx);

  try {
    app.parse(argc, argv);
  } catch (const CLI::Success& e) {  // --help, --help-all, --version
    return ctx.root() ? app.exit(e) : kOk;
  } catch (const CLI::ParseError& e) {
    if (ctx.root()) app.exit(e);
    return kUsage;  // CLI11 uses its own codes; we promise 2 for every usage error
  }
  if (ctx.ranks() > 1 && !runs_on_ranks(app)) {
    if (ctx.root())
      std::cerr << "spinfer: error: only fit and sample run on several MPI ranks; start '"
                << app.get_subcommands()[0]->get_name() << "' without mpirun" << std::endl;
    return kUsage;
  }
  try {
    return ctx.run ? ctx.run() : kUsage;
  } catch (const spinfer::InputError& e) {
    std::cerr << prefix(ctx) << "error: " << e.what() << std::endl;
    return kBadInput;
  } catch (const spinfer::FileError& e) {
    std::cerr << prefix(ctx) << "error: " << e.what() << std::endl;
    return kFileError;
  } catch (const spinfer::NumericalError& e) {
    std::cerr << prefix(ctx) << "numerical failure: " << e.what() << std::endl;
    return kNumerical;
  } catch (const spinfer::Interrupted& e) {
    // MPI: rank 0 stopped the job and writes the checkpoint; it must end the job (an exit code
    // of another rank could reach the launcher first).
    if (!ctx.root()) return kAwaitRootAbort;
    return exit_after_interruption(e.what());  // 128 + signal
  } catch (const std::exception& e) {
    std::cerr << prefix(ctx) << "internal error: " << e.what() << std::endl;
    return kFailure;
  }
}

}  // namespace

int main(int argc, char** argv) {
#ifdef SPINFER_WITH_MPI
  spinfer::cli::MpiSession mpi(&argc, &argv);  // first: MPI may remove its own arguments
  // Only rank 0 acts on stop signals: it writes the checkpoint and exits with 128 + signal, and
  // MPI_Abort then ends the others (a rank stopping on its own could end the job first).
  if (!mpi.team().root())
    for (int s : {SIGTERM, SIGINT, SIGUSR1}) std::signal(s, SIG_IGN);
  const int code = run(argc, argv, mpi.team(), "MPI: " + mpi.library_version() + "\n");
  if (code == kAwaitRootAbort) return mpi.await_root_abort();
  return code == 0 ? 0 : mpi.abort(code);  // a failure on any rank ends every rank
#else
  static const spinfer::SoloTeam solo;
  const int code = run(argc, argv, solo, "MPI: not built in (configure with -DSPINFER_MPI=ON)\n");
  return code == kAwaitRootAbort ? spinfer::cli::kFailure : code;  // cannot happen on rank 0
#endif
}
