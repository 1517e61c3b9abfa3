// The log callback (sprig/log.h, sprig_set_log_callback in sprig.h): the library's one message
// today, the warning for a SPRIG_KERNEL_PATH this CPU cannot honour, reaches a callback set
// through C++ or C, nothing at all is written when none is set, and the sprig program prints it
// as "sprig: warning: MESSAGE" on stderr.
#include <gtest/gtest.h>

#include <cstdlib>
#include <string>
#include <vector>

#include "kernels/kernels.h"
#include "sprig/log.h"
#include "sprig/sprig.h"
#include "support/test_util.h"

namespace sprig {
namespace {

// A name no build knows, so the request is refused on every CPU.
constexpr const char* kUnknownPath = "fastest";

// Sets SPRIG_KERNEL_PATH for one scope and removes the callback and the variable afterwards.
class LogTest : public ::testing::Test {
 protected:
  void SetUp() override { testing::SetEnv("SPRIG_KERNEL_PATH", kUnknownPath); }
  void TearDown() override {
    SetLogCallback(nullptr, nullptr);
    testing::UnsetEnv("SPRIG_KERNEL_PATH");
  }

  // What the warning must say: the refusal, then the path used instead.
  static std::string ExpectedWarning() {
    const Result<kernels::KernelPath> refused = kernels::ResolvePath(kUnknownPath);
    EXPECT_FALSE(refused.ok());
    return refused.status().message() + "; using \"" +
           kernels::ToString(kernels::DetectBestPath()) + "\".";
  }
};

struct Received {
  std::vector<int> levels;
  std::vector<std::string> messages;
};

void CollectCpp(LogLevel level, const char* message, void* user) {
  auto* received = static_cast<Received*>(user);
  received->levels.push_back(static_cast<int>(level));
  received->messages.push_back(message);
}

void CollectC(int level, const char* message, void* user) {
  auto* received = static_cast<Received*>(user);
  received->levels.push_back(level);
  received->messages.push_back(message);
}

TEST_F(LogTest, WarningReachesTheCppCallback) {
  Received received;
  SetLogCallback(CollectCpp, &received);
  EXPECT_EQ(kernels::BestAvailablePath(), kernels::DetectBestPath());
  ASSERT_EQ(received.messages.size(), 1u);
  EXPECT_EQ(received.levels[0], static_cast<int>(LogLevel::kWarning));
  EXPECT_EQ(received.messages[0], ExpectedWarning());
  EXPECT_EQ(received.messages[0].find("SPRIG_KERNEL_PATH"), 0u) << received.messages[0];
}

TEST_F(LogTest, WarningReachesTheCCallback) {
  Received received;
  sprig_set_log_callback(CollectC, &received);
  EXPECT_EQ(kernels::BestAvailablePath(), kernels::DetectBestPath());
  ASSERT_EQ(received.messages.size(), 1u);
  EXPECT_EQ(received.levels[0], SPRIG_LOG_WARNING);
  EXPECT_EQ(received.messages[0], ExpectedWarning());
}

TEST_F(LogTest, ReplacedOrRemovedCallbackIsNotCalled) {
  Received first, second;
  SetLogCallback(CollectCpp, &first);
  sprig_set_log_callback(CollectC, &second);  // the C callback replaces the C++ one
  kernels::BestAvailablePath();
  EXPECT_TRUE(first.messages.empty());
  EXPECT_EQ(second.messages.size(), 1u);
  sprig_set_log_callback(nullptr, nullptr);
  kernels::BestAvailablePath();
  EXPECT_EQ(second.messages.size(), 1u);
  SetLogCallback(CollectCpp, &first);
  kernels::BestAvailablePath();
  EXPECT_EQ(first.messages.size(), 1u);
  EXPECT_EQ(second.messages.size(), 1u);
}

TEST_F(LogTest, NothingIsWrittenWithoutACallback) {
  ::testing::internal::CaptureStdout();
  ::testing::internal::CaptureStderr();
  EXPECT_EQ(kernels::BestAvailablePath(), kernels::DetectBestPath());
  const std::string out = ::testing::internal::GetCapturedStdout();
  const std::string err = ::testing::internal::GetCapturedStderr();
  EXPECT_EQ(out, "");
  EXPECT_EQ(err, "");
}

// The program sets its own callback: the warning line is what it printed before the library
// stopped writing to stderr itself. `pack --dtype f16` converts on the active kernel path.
TEST_F(LogTest, ProgramPrintsTheWarning) {
  testing::TempDir dir;
  testing::PackSynthesized(dir, "m", R"({"family":"stack","input_dim":4,"layers":[
    {"kind":"dense","width":8,"activation":"relu","out":2}]})");
  // Only stderr is kept: the group's stdout is the pipe Run reads, the program's goes nowhere.
  const auto r = testing::Run(
      "{ SPRIG_KERNEL_PATH=" + std::string(kUnknownPath) + " " + testing::SprigCli() + " pack " +
      testing::Quote(dir.File("m.json")) + " " + testing::Quote(dir.File("m.npz")) + " -o " +
      testing::Quote(dir.File("m16.sprig")) + " --dtype f16 2>&1 >/dev/null; }");
  EXPECT_EQ(r.exit_code, 0) << r.output;
  EXPECT_EQ(r.output, "sprig: warning: " + ExpectedWarning() + "\n");
}

}  // namespace
}  // namespace sprig
