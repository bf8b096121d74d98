#include "rank_rounds.hpp"

#include <algorithm>
#include <string>
#include <vector>

#include "spinfer/errors.hpp"

namespace spinfer::detail {

RankTurn meet_after_round(const Team& team, bool running, double objective, const RootDecision& decide) {
  // First meeting: how many ranks still run, and the objective of all units.
  double totals[2] = {running ? 1.0 : 0.0, objective};
  team.sum(totals, 2);
  RankTurn turn;
  turn.anyone_running = totals[0] > 0;
  turn.objective = totals[1];
  // Second meeting: rank 0's decision reaches every rank (the others add zeros).
  double flags[2] = {0, 0};
  if (team.root() && decide) {
    const auto [stop, save] = decide(turn.objective);
    flags[0] = stop ? 1 : 0;
    flags[1] = save ? 1 : 0;
  }
  team.sum(flags, 2);
  turn.stop = flags[0] > 0;
  turn.save = turn.stop || flags[1] > 0;
  return turn;
}

std::vector<nlohmann::json> gather_json(const Team& team, const nlohmann::json& mine, bool all) {
  const std::string text = mine.dump() + "\n";  // dump() escapes newlines inside strings
  const std::vector<std::uint8_t> bytes =
      team.gather_bytes(reinterpret_cast<const std::uint8_t*>(text.data()), text.size(), all);
  std::vector<nlohmann::json> values;
  std::size_t begin = 0;
  for (std::size_t k = 0; k < bytes.size(); ++k) {
    if (bytes[k] != '\n') continue;
    values.push_back(nlohmann::json::parse(bytes.begin() + std::ptrdiff_t(begin),
                                           bytes.begin() + std::ptrdiff_t(k)));
    begin = k + 1;
  }
  return values;
}

nlohmann::json gather_unit_states(const Team& team, const nlohmann::json& mine) {
  const std::vector<nlohmann::json> parts = gather_json(team, mine, false);
  if (!team.root()) return nullptr;
  nlohmann::json all = {{"rounds", std::int64_t(0)},
                        {"evaluations", std::int64_t(0)},
                        {"problems", nlohmann::json::array()}};
  for (const nlohmann::json& part : parts) {
    all["rounds"] = std::max(all["rounds"].get<std::int64_t>(), part.at("rounds").get<std::int64_t>());
    all["evaluations"] = all["evaluations"].get<std::int64_t>() + part.at("evaluations").get<std::int64_t>();
    for (const auto& problem : part.at("problems")) all["problems"].push_back(problem);
  }
  return all;
}

nlohmann::json slice_unit_states(const nlohmann::json& all, std::int64_t begin, std::int64_t end,
                                 std::int64_t total) {
  const auto* problems = all.is_object() && all.contains("problems") ? &all["problems"] : nullptr;
  if (!problems || !problems->is_array() || std::int64_t(problems->size()) != total)
    throw InputError("checkpoint: the saved optimiser state holds " +
                     std::to_string(problems && problems->is_array() ? problems->size() : 0) +
                     " per-unit problems, but this fit has " + std::to_string(total) + " units");
  nlohmann::json part = all;
  part["evaluations"] = begin == 0 ? all.value("evaluations", std::int64_t(0)) : 0;  // counted once
  part["problems"] = nlohmann::json::array();
  for (std::int64_t i = begin; i < end; ++i) part["problems"].push_back((*problems)[std::size_t(i)]);
  return part;
}

}  // namespace spinfer::detail
