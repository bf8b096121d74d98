// `spinfer convert`: between .npy, .npz, .csv, .tsv and .txt, and between conventions.
#include <memory>

#include <nlohmann/json.hpp>

#include "commands.hpp"
#include "spinfer/io.hpp"

namespace spinfer::cli {
namespace {

struct ConvertArgs {
  std::string input, convention, member, to;
};

int run_convert(const Context& ctx, const ConvertArgs& a) {
  check_output_path(ctx.common.out, ctx.common.force);
  ReadOptions ro;
  if (!a.convention.empty()) ro.convention = parse_convention(a.convention);
  ro.member = a.member;
  SpinMatrix m = read_matrix(a.input, ro);
  const Convention from = m.convention();
  if (!a.to.empty()) m.set_convention(parse_convention(a.to));
  const std::string ext = file_extension(ctx.common.out);
  if (!m.names().empty() && ext == ".npy")
    log_info(ctx, "names_not_stored",
             "unit names are not stored in .npy files; use .npz or .csv to keep them");
  write_matrix(ctx.common.out, m);
  log_info(ctx, "written", a.input + " (" + to_string(from) + ") -> " + ctx.common.out + " (" +
                               to_string(m.convention()) + ")");
  print_summary(nlohmann::json{{"command", "convert"},
                               {"input", a.input},
                               {"output", ctx.common.out},
                               {"samples", m.rows()},
                               {"units", m.cols()},
                               {"from_convention", to_string(from)},
                               {"to_convention", to_string(m.convention())}}
                    .dump());
  return kOk;
}

}  // namespace

void add_convert_command(CLI::App& app, Context& ctx) {
  auto args = std::make_shared<ConvertArgs>();
  CLI::App* sub = app.add_subcommand("convert", "Convert a data matrix between file formats and conventions");
  sub->add_option("IN", args->input, "Input matrix (.npy, .npz, .csv, .tsv, .txt)")->required();
  sub->add_option("--to", args->to, "Output convention: binary (0/1) or spin (-1/+1); default: keep")
      ->check(CLI::IsMember({"binary", "spin"}));
  sub->add_option("--convention", args->convention,
                  "How the input's values are read (binary or spin); default: detect")
      ->check(CLI::IsMember({"binary", "spin"}));
  sub->add_option("--member", args->member, "Array to read from an .npz archive");
  add_common_options(*sub, ctx.common);
  sub->get_option("--out")->required();
  sub->footer(
      "The output format follows the --out extension. .npz keeps unit names (array 'names'),\n"
      ".csv/.tsv keep them as a header row, .npy does not.\n\n"
      "Example:\n  spinfer convert recording.csv --out recording.npy --to spin\n");
  sub->callback([&ctx, args] { ctx.run = [&ctx, args] { return run_convert(ctx, *args); }; });
}

}  // namespace spinfer::cli
