// docs/variants.md against the built program: every smallest config it shows synthesizes, packs,
// inspects and runs, every row of its table links to one of them, and every test the table names
// as the torch.nn check of a variant is a test of this binary.
#include <gtest/gtest.h>

#include <cmath>
#include <map>
#include <set>
#include <sstream>
#include <string>
#include <vector>

#include "sprig/model.h"
#include "support/test_util.h"

namespace sprig {
namespace {

using testing::Quote;

struct DocVariants {
  std::vector<std::vector<std::string>> rows;  // the table's cells, header excluded
  std::map<std::string, std::string> configs;  // section name → its JSON block
};

std::vector<std::string> Cells(const std::string& line) {
  std::vector<std::string> cells;
  std::stringstream in(line.substr(1));  // after the leading '|'
  std::string cell;
  while (std::getline(in, cell, '|')) {
    const size_t first = cell.find_first_not_of(' ');
    const size_t last = cell.find_last_not_of(' ');
    cells.push_back(first == std::string::npos ? "" : cell.substr(first, last - first + 1));
  }
  return cells;
}

DocVariants ReadDoc() {
  DocVariants doc;
  std::stringstream in(testing::ReadFile(std::string(SPRIG_SOURCE_DIR) + "/docs/variants.md"));
  std::string line, section, block;
  bool in_table = false, in_json = false;
  while (std::getline(in, line)) {
    if (in_json) {
      if (line.rfind("```", 0) == 0) {
        in_json = false;
        doc.configs[section] = block;
      } else {
        block += line + "\n";
      }
      continue;
    }
    if (line.rfind("| variant |", 0) == 0) {
      in_table = true;
      continue;
    }
    if (in_table && line.rfind("|", 0) == 0) {
      if (line.rfind("|---", 0) != 0) doc.rows.push_back(Cells(line));
      continue;
    }
    in_table = false;
    if (line.rfind("### ", 0) == 0) section = line.substr(4);
    if (line == "```json") {
      in_json = true;
      block.clear();
    }
  }
  return doc;
}

// "[name](#name)" → "name".
std::string LinkTarget(const std::string& cell) {
  const size_t open = cell.find("(#"), close = cell.rfind(')');
  if (open == std::string::npos || close == std::string::npos || close < open) return "";
  return cell.substr(open + 2, close - open - 2);
}

std::set<std::string> RegisteredTests() {
  std::set<std::string> names;
  const auto* unit = ::testing::UnitTest::GetInstance();
  for (int s = 0; s < unit->total_test_suite_count(); ++s) {
    const auto* suite = unit->GetTestSuite(s);
    for (int t = 0; t < suite->total_test_count(); ++t) {
      names.insert(std::string(suite->name()) + "." + suite->GetTestInfo(t)->name());
    }
  }
  return names;
}

TEST(VariantsDoc, TableLinksEveryConfigAndNamesRealTests) {
  const DocVariants doc = ReadDoc();
  ASSERT_GE(doc.rows.size(), 9u) << "the variants table of docs/variants.md is missing or short";
  const std::set<std::string> tests = RegisteredTests();
  std::set<std::string> linked;
  for (const auto& row : doc.rows) {
    ASSERT_EQ(row.size(), 4u) << "a row of the variants table: " << row[0];
    const std::string target = LinkTarget(row[2]);
    EXPECT_TRUE(doc.configs.count(target)) << row[0] << " links to a missing config " << row[2];
    linked.insert(target);
    // The cell starts with the test's name in backquotes; a comment may follow.
    const size_t open = row[3].find('`'), close = row[3].find('`', open + 1);
    const std::string test =
        open == 0 && close != std::string::npos ? row[3].substr(1, close - 1) : std::string();
    EXPECT_TRUE(tests.count(test))
        << row[0] << " names the test " << row[3] << ", which this test binary does not have";
  }
  for (const auto& [name, config] : doc.configs) {
    EXPECT_TRUE(linked.count(name)) << "config " << name << " is in no row of the table";
  }
}

TEST(VariantsDoc, EverySmallestConfigPacksAndRuns) {
  const DocVariants doc = ReadDoc();
  ASSERT_FALSE(doc.configs.empty());
  testing::TempDir dir;
  const std::string cli = testing::SprigCli();
  for (const auto& [name, config] : doc.configs) {
    SCOPED_TRACE(name);
    const std::string path = testing::PackSynthesized(dir, name, config, 7);
    const auto inspect = testing::Run(cli + " inspect " + Quote(path));
    EXPECT_EQ(inspect.exit_code, 0) << inspect.output;
    auto model = Model::open(path);
    ASSERT_TRUE(model.ok()) << model.status().message();
    auto session = testing::OpenSession(path, 1);
    ASSERT_NE(session, nullptr);
    const ModelConfig& c = (*model)->config();
    std::vector<float> out(4 * c.output_dim());
    Status st;
    if (c.family == Family::kStack) {
      std::vector<float> rows(4 * c.input_dim);
      for (size_t i = 0; i < rows.size(); ++i) rows[i] = std::sin(0.7f * static_cast<float>(i));
      st = session->forward(rows.data(), 4, out.data());
    } else {
      const int32_t tokens[4] = {1, 5, 2, 7};
      st = session->forward_tokens(tokens, 1, 4, out.data());
    }
    ASSERT_TRUE(st.ok()) << st.message();
    for (float v : out) ASSERT_TRUE(std::isfinite(v));
  }
}

}  // namespace
}  // namespace sprig
