// sprig inspect MODEL [--check] [--json] [--tensors]
#include <cstdio>
#include <map>
#include <memory>
#include <nlohmann/json.hpp>
#include <string>
#include <utility>

#include "cli.h"
#include "format/preamble.h"
#include "model/flops.h"
#include "sprig/model.h"

namespace sprig::cli {
namespace {

struct InspectArgs {
  std::string model;
  bool check = false, json = false, tensors = false;
};

std::string Describe(const LayerConfig& l) {
  std::string s = ToString(l.kind);
  char buf[160];
  switch (l.kind) {
    case LayerKind::kDense:
      std::snprintf(buf, sizeof(buf), " width %u", l.width);
      break;
    case LayerKind::kTree:
      if (l.mode == TreeMode::kLeaf) {
        std::snprintf(buf, sizeof(buf), " leaf depth %u, leaf width %u", l.depth, l.leaf_width);
      } else {
        std::snprintf(buf, sizeof(buf), " path depth %u", l.depth);
      }
      break;
    case LayerKind::kExperts:
      std::snprintf(buf, sizeof(buf), " %u experts, top %u, width %u", l.experts, l.top_k, l.width);
      break;
  }
  s += buf;
  s += std::string(", ") + ToString(l.activation) + (l.gated ? ", gated" : "");
  return s;
}

// "pre-norm, attention biases q k v o, final norm": the block variant and, for an lm head, its
// transform and bias (docs/model-semantics.md).
std::string DescribeBlocks(const ModelConfig& c) {
  std::string s = std::string(ToString(c.norm_position)) + "-norm";
  if (c.embed_norm) s += ", norm on the embeddings";
  const ProjectionBias& b = c.attn_bias;
  if (b.none()) {
    s += ", no attention biases";
  } else {
    s += ", attention biases";
    for (const auto& [name, on] : {std::pair{" q", b.q}, {" k", b.k}, {" v", b.v}, {" o", b.o}}) {
      if (on) s += name;
    }
  }
  s += c.final_norm ? ", final norm" : ", no final norm";
  if (c.head.kind == HeadKind::kLm) {
    if (c.head.transform) {
      s += std::string(", head transform ") + ToString(c.head.transform_activation) +
           (c.head.transform_norm ? " + norm" : "");
    }
    if (c.head.bias) s += ", head bias";
    if (c.tie_embeddings) s += ", tied embeddings";
  }
  return s;
}

// An experts layer's router scoring and shared experts when they differ from the defaults
// (softmax, none): "sigmoid router; 2 shared experts of width 32 with a sigmoid gate", or "".
std::string ExpertsDetail(const LayerConfig& l) {
  if (l.kind != LayerKind::kExperts) return "";
  std::string s;
  if (l.router_scoring != RouterScoring::kSoftmax) {
    s += std::string(ToString(l.router_scoring)) + " router";
  }
  if (l.shared_experts > 0) {
    char buf[120];
    std::snprintf(buf, sizeof(buf), "%s%u shared expert%s of width %u%s", s.empty() ? "" : "; ",
                  l.shared_experts, l.shared_experts == 1 ? "" : "s", l.shared_width,
                  l.shared_gate ? " with a sigmoid gate" : "");
    s += buf;
  }
  return s;
}

uint64_t PagesPerRecord(uint64_t size) {
  return (size + format::kPageSize - 1) / format::kPageSize;
}

nlohmann::json ToJson(const Model& m) {
  nlohmann::json j;
  j["file"] = {{"path", m.path()},
               {"size", m.file_size()},
               {"format_version", m.format_version()},
               {"producer", m.producer()},
               {"header_size", m.header_size()}};
  j["config"] = nlohmann::json::parse(m.config_json(), nullptr, false);
  for (const SectionDescription& s : m.sections()) {
    j["sections"].push_back({{"name", s.name},
                             {"kind", s.records     ? "records"
                                      : s.tokenizer ? "tokenizer"
                                                    : "hot"},
                             {"offset", s.offset},
                             {"size", s.size},
                             {"padding", s.padding},
                             {"layer", s.layer}});
  }
  const ModelConfig& c = m.config();
  for (const LayerDescription& layer : m.layer_descriptions()) {
    const std::string detail = ExpertsDetail(layer.config);
    nlohmann::json l = {
        {"index", layer.index},
        {"kind", ToString(layer.config.kind)},
        {"description", Describe(layer.config) + (detail.empty() ? "" : "; ") + detail},
        {"params", layer.params},
        {"flops_per_token", layer.flops_per_token},
        {"dense_width", layer.dense_width},
        {"dense_flops_per_token", layer.dense_flops_per_token}};
    if (layer.record_set >= 0) {
      l["records"] = {{"count", layer.records},
                      {"record_size", layer.record_size},
                      {"pages_per_record", PagesPerRecord(layer.record_size)}};
    }
    j["layers"].push_back(l);
  }
  const ModelCost total = CostOf(c, c.family == Family::kTransformer ? c.max_seq / 2 : 0);
  j["totals"] = {{"params", total.params},
                 {"ffn_flops_per_token", total.ffn_flops},
                 {"ffn_dense_flops_per_token", total.ffn_dense_flops},
                 {"other_flops_per_token", total.other_flops}};
  for (const TensorDescription& t : m.tensor_descriptions()) {
    j["tensors"].push_back({{"name", t.name},
                            {"dtype", ToString(t.dtype)},
                            {"shape", t.shape},
                            {"hot_rows", t.hot_rows},
                            {"record_set", t.record_set},
                            {"error_max_abs", t.error_max_abs},
                            {"error_rel_rms", t.error_rel_rms}});
  }
  return j;
}

// One line on the storage types in use and the largest storage error the packer measured.
void PrintStorage(const std::vector<TensorDescription>& tensors) {
  std::map<std::string, uint64_t> bytes_by_type;
  const TensorDescription* worst = nullptr;
  for (const TensorDescription& t : tensors) {
    bytes_by_type[ToString(t.dtype)] += t.bytes;
    if (worst == nullptr || t.error_rel_rms > worst->error_rel_rms) worst = &t;
  }
  std::printf("  storage     ");
  for (const auto& [type, bytes] : bytes_by_type) {
    std::printf(" %s %s;", type.c_str(), HumanBytes(bytes).c_str());
  }
  if (worst != nullptr && worst->error_rel_rms > 0) {
    std::printf(" largest error %s (relative RMS %.3g, max abs %.3g)", worst->name.c_str(),
                worst->error_rel_rms, worst->error_max_abs);
  }
  std::printf("\n");
}

void PrintHuman(const Model& f, bool list_tensors) {
  const ModelConfig& c = f.config();
  const std::vector<TensorDescription> tensors = f.tensor_descriptions();
  std::printf("%s: sprig format %u, written by %s\n", f.path().c_str(), f.format_version(),
              f.producer().c_str());
  if (!c.name.empty()) std::printf("  name         %s\n", c.name.c_str());
  if (!c.description.empty()) std::printf("  description  %s\n", c.description.c_str());
  if (c.family == Family::kStack) {
    std::printf("  family       stack: %u inputs -> %u outputs, %zu layers\n", c.input_dim,
                c.output_dim(), c.layers.size());
  } else {
    std::printf(
        "  family       transformer: %zu blocks, d_model %u, %u heads (%u kv), vocab %u, "
        "max_seq %u, %s, %s positions, head %s, tokenizer %s\n",
        c.layers.size(), c.d_model, c.n_heads, c.n_kv_heads, c.vocab_size, c.max_seq,
        ToString(c.norm), ToString(c.positions), ToString(c.head.kind), ToString(c.tokenizer));
    std::printf("  blocks       %s\n", DescribeBlocks(c).c_str());
  }
  std::printf("  file         %s (header %s)\n", HumanBytes(f.file_size()).c_str(),
              HumanBytes(f.header_size()).c_str());
  PrintStorage(tensors);
  std::printf("\n");

  std::printf("sections\n  %-18s %12s %12s %10s\n", "name", "offset", "size", "padding");
  for (const SectionDescription& s : f.sections()) {
    const double pct = s.size ? 100.0 * static_cast<double>(s.padding) / s.size : 0.0;
    std::printf("  %-18s %12llu %12s %9.2f%%\n", s.name.c_str(),
                static_cast<unsigned long long>(s.offset), HumanBytes(s.size).c_str(), pct);
  }

  std::printf("\nlayers (FLOPs per token; a multiply-add is 2)\n");
  std::printf("  %-3s %-44s %10s %10s %12s %9s\n", "#", "kind", "params", "FLOPs", "dense FLOPs",
              "saving");
  for (const LayerDescription& layer : f.layer_descriptions()) {
    const double ratio = layer.flops_per_token ? static_cast<double>(layer.dense_flops_per_token) /
                                                     static_cast<double>(layer.flops_per_token)
                                               : 0.0;
    std::printf("  %-3zu %-44s %10s %10s %12s %8.1fx\n", layer.index,
                Describe(layer.config).c_str(), HumanCount(layer.params).c_str(),
                HumanCount(layer.flops_per_token).c_str(),
                HumanCount(layer.dense_flops_per_token).c_str(), ratio);
    // Too long for the kind column: a line of its own, like the records line.
    const std::string detail = ExpertsDetail(layer.config);
    if (!detail.empty()) std::printf("      %s\n", detail.c_str());
    if (layer.record_set >= 0) {
      std::printf("      %llu records of %s (%llu pages each)\n",
                  static_cast<unsigned long long>(layer.records),
                  HumanBytes(layer.record_size).c_str(),
                  static_cast<unsigned long long>(PagesPerRecord(layer.record_size)));
    }
  }
  const ModelCost total = CostOf(c, c.family == Family::kTransformer ? c.max_seq / 2 : 0);
  std::printf("\n  parameters %s; feed-forward FLOPs per token %s (dense equivalent %s)",
              HumanCount(total.params).c_str(), HumanCount(total.ffn_flops).c_str(),
              HumanCount(total.ffn_dense_flops).c_str());
  if (c.family == Family::kTransformer) {
    std::printf("; attention and head %s (at position %u)", HumanCount(total.other_flops).c_str(),
                c.max_seq / 2);
  }
  std::printf("\n");
  if (list_tensors) {
    std::printf("\ntensors (storage error against the packed source: max abs, relative RMS)\n");
    for (const TensorDescription& t : tensors) {
      const char* where = t.record_set < 0 ? "hot" : (t.hot_rows ? "hot+records" : "records");
      std::printf("  %-40s %-5s %-20s %-12s %10.3g %10.3g\n", t.name.c_str(), ToString(t.dtype),
                  ShapeText(t.shape).c_str(), where, t.error_max_abs, t.error_rel_rms);
    }
  }
}

int RunInspect(const InspectArgs& a) {
  auto model = Model::open(a.model);
  if (!model.ok()) return Fail("inspect", model.status());
  const Model& f = **model;
  Status check;
  if (a.check) check = f.verify_checksums();
  if (a.json) {
    nlohmann::json j = ToJson(f);
    if (a.check) j["check"] = {{"ok", check.ok()}, {"message", check.message()}};
    std::printf("%s\n", j.dump(2, ' ', false, kReplaceInvalidUtf8).c_str());
  } else {
    PrintHuman(f, a.tensors);
    if (a.check) {
      if (check.ok()) {
        size_t record_sets = 0;
        for (const LayerDescription& layer : f.layer_descriptions()) {
          record_sets += layer.record_set >= 0 ? 1 : 0;
        }
        std::printf("\ncheck: every checksum matches (%zu tensors, %zu record sets)\n",
                    f.tensor_descriptions().size(), record_sets);
      }
    }
  }
  if (!check.ok()) return Fail("inspect", check);
  return kExitOk;
}

}  // namespace

Verb AddInspect(CLI::App& app) {
  auto args = std::make_shared<InspectArgs>();
  CLI::App* c = app.add_subcommand(
      "inspect", "Show a .sprig file's config, sections, sizes and per-layer FLOPs per token.");
  c->add_option("MODEL", args->model, "the .sprig file")->required();
  c->add_flag("--check", args->check,
              "verify every checksum (reads the whole file); exit 1 on a "
              "mismatch");
  c->add_flag("--json", args->json, "print JSON instead of tables");
  c->add_flag("--tensors", args->tensors, "also list every tensor");
  return {c, [args] { return RunInspect(*args); }};
}

}  // namespace sprig::cli
