#include "bench/kit/measure.h"

#include <algorithm>
#include <chrono>
#include <cstdio>
#include <thread>

#include "base/status_macros.h"
#include "bench/kit/floor_timer.h"
#include "bench/kit/models.h"
#include "kernels/kernels.h"
#include "numeric/random.h"
#include "platform/process.h"

namespace sprig::bench {
namespace {

using Clock = std::chrono::steady_clock;

double Seconds(Clock::time_point a, Clock::time_point b) {
  return std::chrono::duration<double>(b - a).count();
}

// CPU time of the whole process (all its threads), in seconds. On a busy machine wall time
// includes the time other programs held the CPU, and a long run absorbs more of it than a short
// one; CPU time does not.
double ProcessCpuSeconds() {
  return platform::ProcessCpuSeconds();
}

// Samples of the memory curve per first pass: enough for a smooth line, few enough that reading
// the mapping's resident pages (/proc/self/smaps on Linux, about a millisecond) stays out of
// the way.
constexpr size_t kCurveSamples = 48;

// The inputs of one repetition: stack rows are fixed for the run (distinct rows within a
// repetition, so a tree's path does not stay in cache as it would for one repeated row);
// transformer prompts and decoded tokens are new random tokens per repetition, the same for
// every side within it.
struct Inputs {
  std::vector<float> pool;  // stack: rows × input_dim
  std::vector<int32_t> prompt, next;
};

std::vector<float> RowPool(size_t rows, size_t in, uint64_t seed) {
  numeric::Random rng(seed);
  std::vector<float> v(rows * in);
  for (float& x : v) x = rng.Normal();
  return v;
}

// The rows of a repetition from the file's rows, in turn, wrapping to the start.
std::vector<float> FileRowPool(const std::vector<float>& file, size_t rows, size_t in) {
  const size_t file_rows = file.size() / in;
  std::vector<float> v(rows * in);
  for (size_t r = 0; r < rows; ++r) {
    std::copy_n(file.begin() + static_cast<std::ptrdiff_t>((r % file_rows) * in), in,
                v.begin() + static_cast<std::ptrdiff_t>(r * in));
  }
  return v;
}

// The tokens of input `index` (0: the first pass and the warm-up; r + 1: repetition r): from the
// file's prompts in turn, or random from the seed.
void SelectTokens(const ModelConfig& c, const MeasureOptions& o, size_t index, Inputs* in) {
  if (!o.input_prompts.empty()) {
    in->prompt = o.input_prompts[index % o.input_prompts.size()];
    in->next = o.input_continuations[index % o.input_prompts.size()];
    return;
  }
  numeric::Random rng(o.seed + index);
  auto draw = [&](size_t n) {
    std::vector<int32_t> t(n);
    for (int32_t& v : t) v = static_cast<int32_t>(rng.Next() % c.vocab_size);
    return t;
  };
  in->prompt = draw(o.prompt_tokens);
  in->next = draw(o.decode_tokens);
}

size_t CallsFor(const MeasureOptions& o, size_t batch) {
  return std::max<size_t>(1, (o.rows + batch - 1) / batch);
}

// One side's run of a workload; `sample` is called after each step with units done so far.
struct RunOut {
  double seconds = 0;                              // stack: all calls; transformer: prefill
  double decode_seconds = 0;                       // transformer
  double cpu_seconds = 0, decode_cpu_seconds = 0;  // the same in process CPU time
  double first_ms = 0;                             // the first call or the prefill
  std::vector<double> latency_ms;                  // per call (stack) or per decoded token
};

Status RunRows(Session& s, const Inputs& in, size_t batch, size_t calls, RunOut* out,
               const std::function<void(size_t, size_t)>& sample) {
  const ModelConfig& c = s.model().config();
  std::vector<float> y(batch * c.output_dim());
  const auto start = Clock::now();
  const double cpu = ProcessCpuSeconds();
  for (size_t i = 0; i < calls; ++i) {
    const auto t0 = Clock::now();
    SPRIG_RETURN_IF_ERROR(s.forward(in.pool.data() + i * batch * c.input_dim, batch, y.data()));
    const double ms = Seconds(t0, Clock::now()) * 1e3;
    out->latency_ms.push_back(ms);
    if (i == 0) out->first_ms = ms;
    if (sample) sample(i, (i + 1) * batch);
  }
  out->seconds = Seconds(start, Clock::now());
  out->cpu_seconds = ProcessCpuSeconds() - cpu;
  return Status::Ok();
}

Status RunSequence(Session& s, const Inputs& in, RunOut* out,
                   const std::function<void(size_t, size_t)>& sample) {
  std::vector<float> logits(s.model().config().vocab_size);
  s.reset();
  auto t0 = Clock::now();
  double cpu = ProcessCpuSeconds();
  SPRIG_RETURN_IF_ERROR(s.append_tokens(in.prompt.data(), in.prompt.size(), logits.data()));
  out->seconds = Seconds(t0, Clock::now());
  out->cpu_seconds = ProcessCpuSeconds() - cpu;
  out->first_ms = out->seconds * 1e3;
  if (sample) sample(0, in.prompt.size());
  const auto start = Clock::now();
  cpu = ProcessCpuSeconds();
  for (size_t i = 0; i < in.next.size(); ++i) {
    t0 = Clock::now();
    SPRIG_RETURN_IF_ERROR(s.append_token(in.next[i], logits.data()));
    out->latency_ms.push_back(Seconds(t0, Clock::now()) * 1e3);
    if (sample) sample(i + 1, in.prompt.size() + i + 1);
  }
  out->decode_seconds = Seconds(start, Clock::now());
  out->decode_cpu_seconds = ProcessCpuSeconds() - cpu;
  return Status::Ok();
}

uint64_t RoutedFlops(const ModelConfig& c) {
  uint64_t f = 0;
  for (const LayerConfig& l : c.layers) {
    if (IsRouted(l)) f += CostOf(l).flops_per_token;
  }
  return f;
}

std::vector<SideFlops> FlopsOf(const ModelConfig& c, const MeasureOptions& o) {
  std::vector<std::pair<std::string, uint64_t>> phases;
  if (c.family == Family::kStack) {
    phases = {{"rows", 0}};
  } else {
    // Attention grows with the position: the prompt's tokens average P / 2, the decoded ones
    // P + G / 2.
    phases = {{"prefill", o.prompt_tokens / 2}, {"decode", o.prompt_tokens + o.decode_tokens / 2}};
  }
  std::vector<SideFlops> out;
  for (const auto& [phase, context] : phases) {
    out.push_back({phase, context, CostOf(c, context), RoutedFlops(c)});
  }
  return out;
}

const SideFlops* FlopsAt(const SideInfo& s, const std::string& phase) {
  for (const SideFlops& f : s.flops) {
    if (f.phase == phase) return &f;
  }
  return nullptr;
}

// The points of the run, in the order repetitions visit them.
std::vector<Point> MakePoints(const ModelConfig& c, const MeasureOptions& o) {
  std::vector<Point> points;
  for (size_t t : o.threads) {
    if (c.family == Family::kStack) {
      for (size_t b : o.batches) {
        Point p;
        p.threads = t;
        p.phase = "rows";
        p.batch = b;
        p.units = CallsFor(o, b) * b;
        points.push_back(p);
      }
    } else {
      Point p;
      p.threads = t;
      p.phase = "prefill";
      p.batch = o.prompt_tokens;
      p.units = o.prompt_tokens;
      points.push_back(p);
      p.phase = "decode";
      p.batch = 1;
      p.units = o.decode_tokens;
      points.push_back(p);
    }
  }
  return points;
}

class Runner {
 public:
  Runner(const std::shared_ptr<const Model> (&models)[kSides], const MeasureOptions& o)
      : o_(o), config_(models[kModel]->config()) {
    for (size_t s = 0; s < kSides; ++s) models_[s] = models[s];
  }

  Status Open() {
    for (size_t t : o_.threads) {
      sessions_.emplace_back();
      for (size_t s = 0; s < kSides; ++s) {
        SessionOptions so;
        so.threads = t;
        if (s == kModel) so.compute = o_.compute;
        SPRIG_ASSIGN_OR_RETURN(auto session, Session::create(models_[s], so));
        sessions_.back().push_back(std::move(session));
      }
    }
    std::vector<const Session*> model_sessions;
    for (const auto& per_thread : sessions_) model_sessions.push_back(per_thread[kModel].get());
    SPRIG_ASSIGN_OR_RETURN(timer_, FloorTimer::Create(models_[kModel], model_sessions));
    if (config_.family == Family::kStack) {
      size_t rows = 0;
      for (size_t b : o_.batches) rows = std::max(rows, CallsFor(o_, b) * b);
      inputs_.pool = o_.input_rows.empty() ? RowPool(rows, config_.input_dim, o_.seed)
                                           : FileRowPool(o_.input_rows, rows, config_.input_dim);
      SPRIG_RETURN_IF_ERROR(timer_->TraceRows(inputs_.pool.data(), rows));
    }
    return Status::Ok();
  }

  // The working sets the machine is measured at: the model's parts, its hot section and its file.
  MachineOptions MachinePlan() const {
    MachineOptions mo;
    timer_->footprint().WorkingSets(o_.prompt_tokens + o_.decode_tokens, &mo.sizes, &mo.reasons);
    mo.sizes.push_back(models_[kModel]->file_size());
    mo.reasons.push_back("file");
    mo.sizes.push_back(models_[kModel]->residency().hot_size);
    mo.reasons.push_back("hot section");
    return mo;
  }

  // The machine the floors divide by, on the sessions' kernel path, at the working sets of the
  // model's parts, its hot section, its whole file and each point's bytes per call (the working
  // set of the whole model's parts, floors.h).
  Status MeasureTheMachine(Measurement* m) {
    MachineOptions mo = MachinePlan();
    for (const Point& p : m->points) {
      const FloorTiming& f = p.machine_floor;
      if (f.work.empty() || p.units == 0) continue;
      double bytes = 0;
      for (const WorkCost& w : f.work[0]) bytes += w.bytes;
      mo.sizes.push_back(static_cast<uint64_t>(bytes * p.batch / p.units));
      mo.reasons.push_back(p.phase == "rows" ? "a call of " + std::to_string(p.batch) + " rows"
                                             : "a " + p.phase + " call");
    }
    mo.thread_counts = o_.threads;
    mo.step = [this] { Step(); };
    SPRIG_ASSIGN_OR_RETURN(const kernels::KernelPath path,
                           kernels::ResolvePath(sessions_[0][kModel]->kernel_path()));
    m->machine = MeasureMachine(kernels::Kernels(path), mo);
    // The total counted every point's size; equal sizes were measured once.
    done_ = total_ - 1;
    Step();
    return Status::Ok();
  }

  // The first pass of each side: first call and resident memory against tokens processed.
  Status FirstPass(Measurement* m) {
    if (config_.family == Family::kTransformer) SelectTokens(config_, o_, 0, &inputs_);
    for (size_t s = 0; s < kSides; ++s) {
      SideMemory& mem = m->sides[s].memory;
      const Model& model = *models_[s];
      const size_t steps =
          config_.family == Family::kStack ? CallsFor(o_, o_.batches[0]) : 1 + o_.decode_tokens;
      const size_t stride = std::max<size_t>(1, steps / kCurveSamples);
      auto sample = [&](size_t step, size_t units) {
        if (step % stride != 0 && step + 1 != steps) return;
        const uint64_t r = model.process_resident_bytes();
        mem.curve.push_back({units, r});
        mem.mapped_resident_peak = std::max(mem.mapped_resident_peak, r);
      };
      mem.curve.push_back({0, model.process_resident_bytes()});
      RunOut out;
      SPRIG_RETURN_IF_ERROR(RunOnce(*sessions_[0][s], o_.batches[0], &out, sample));
      mem.first_call_ms = out.first_ms;
      Step();
    }
    return Status::Ok();
  }

  Status WarmUp(const std::vector<Point>& points) {
    for (size_t ti = 0; ti < o_.threads.size(); ++ti) {
      for (const Point& p : points) {
        if (p.threads != o_.threads[ti] || p.phase == "decode") continue;
        for (size_t s = 0; s < kSides; ++s) {
          RunOut out;
          SPRIG_RETURN_IF_ERROR(RunOnce(*sessions_[ti][s], p.batch, &out, nullptr));
          Step();
        }
      }
    }
    return Status::Ok();
  }

  Status Repeat(std::vector<Point>* points) {
    for (size_t r = 0; r < o_.repeat; ++r) {
      if (config_.family == Family::kTransformer) {
        SelectTokens(config_, o_, r + 1, &inputs_);
        SPRIG_RETURN_IF_ERROR(timer_->TraceSequence(inputs_.prompt, inputs_.next));
      }
      for (size_t ti = 0; ti < o_.threads.size(); ++ti) {
        for (size_t pi = 0; pi < points->size(); ++pi) {
          Point& p = (*points)[pi];
          // A transformer's decode point is measured in the same run as its prefill point.
          if (p.threads != o_.threads[ti] || p.phase == "decode") continue;
          Point* decode = pi + 1 < points->size() ? &(*points)[pi + 1] : nullptr;
          for (size_t i = 0; i <= kSides; ++i) {
            // The routed layers alone take a rotating place among the sides, so that what ran
            // before them (and what it left in the caches) varies as it does for the sides.
            if (i == r % (kSides + 1)) {
              timer_->TimeLayers(ti, &p, decode);
              Step();
            }
            if (i == kSides) break;
            const size_t s = (r + i) % kSides;
            RunOut out;
            SPRIG_RETURN_IF_ERROR(RunOnce(*sessions_[ti][s], p.batch, &out, nullptr));
            Record(out, s, &p, decode);
            Step();
          }
          timer_->AddModel(&p, decode);
        }
      }
    }
    return Status::Ok();
  }

  // The model's routing on the benchmark's inputs, from a fresh session so that no side's
  // records-touched count sees inputs the others did not. Stack: every distinct row of the
  // pool; transformer: every distinct sequence the run fed (prompt and decoded tokens).
  Status Usage(Measurement* m) {
    SPRIG_ASSIGN_OR_RETURN(auto session, Session::create(models_[kModel]));
    std::vector<Routes> all;
    if (config_.family == Family::kStack) {
      size_t rows = inputs_.pool.size() / config_.input_dim;
      if (!o_.input_rows.empty()) rows = std::min(rows, o_.input_rows.size() / config_.input_dim);
      std::vector<float> y(rows * config_.output_dim());
      all.emplace_back();
      SPRIG_RETURN_IF_ERROR(session->forward(inputs_.pool.data(), rows, y.data(), &all.back()));
    } else {
      const size_t used = o_.input_prompts.empty()
                              ? o_.repeat + 1
                              : std::min(o_.repeat + 1, o_.input_prompts.size());
      Inputs in;
      for (size_t i = 0; i < used; ++i) {
        SelectTokens(config_, o_, i, &in);
        std::vector<int32_t> seq = in.prompt;
        seq.insert(seq.end(), in.next.begin(), in.next.end());
        std::vector<float> y(seq.size() * config_.output_dim());
        all.emplace_back();
        SPRIG_RETURN_IF_ERROR(
            session->forward_tokens(seq.data(), 1, seq.size(), y.data(), &all.back()));
      }
    }
    const std::vector<LayerDescription> layers = models_[kModel]->layer_descriptions();
    for (size_t l = 0; !all.empty() && l < all[0].layers.size(); ++l) {
      LayerUsage u;
      u.layer = all[0].layers[l].layer;
      u.counts.assign(layers[u.layer].units, 0);
      for (const Routes& routes : all) {
        for (int32_t c : routes.layers[l].choices) {
          if (c >= 0 && static_cast<size_t>(c) < u.counts.size()) ++u.counts[c];
        }
      }
      m->usage.push_back(std::move(u));
    }
    return Status::Ok();
  }

  // Point.copies_scaling for every point on more than one thread: per thread count T, T
  // one-thread sessions of the model run the point's workload at once, in rounds alternating
  // with one of them alone.
  Status MeasureCopies(std::vector<Point>* points) {
    constexpr int kRounds = 3;
    for (size_t threads : o_.threads) {
      if (threads < 2) continue;
      std::vector<std::unique_ptr<Session>> copies;
      for (size_t t = 0; t < threads; ++t) {
        SessionOptions so;
        so.threads = 1;
        so.compute = o_.compute;
        SPRIG_ASSIGN_OR_RETURN(auto session, Session::create(models_[kModel], so));
        copies.push_back(std::move(session));
      }
      for (size_t pi = 0; pi < points->size(); ++pi) {
        Point& p = (*points)[pi];
        if (p.threads != threads || p.phase == "decode") continue;
        Point* decode = pi + 1 < points->size() && (*points)[pi + 1].phase == "decode"
                            ? &(*points)[pi + 1]
                            : nullptr;
        // Rates of the point (and of its decode point): alone, and all copies summed.
        double alone[2] = {0, 0}, together[2] = {0, 0};
        for (int round = 0; round < kRounds; ++round) {
          RunOut out;
          SPRIG_RETURN_IF_ERROR(RunOnce(*copies[0], p.batch, &out, nullptr));
          alone[0] = std::max(alone[0], Rate(p.units, out.seconds));
          if (decode) alone[1] = std::max(alone[1], Rate(decode->units, out.decode_seconds));
          std::vector<RunOut> outs(threads);
          std::vector<Status> status(threads, Status::Ok());
          std::vector<std::thread> runners;
          for (size_t t = 0; t < threads; ++t) {
            runners.emplace_back(
                [&, t] { status[t] = RunOnce(*copies[t], p.batch, &outs[t], nullptr); });
          }
          for (std::thread& r : runners) r.join();
          double sum[2] = {0, 0};
          for (size_t t = 0; t < threads; ++t) {
            SPRIG_RETURN_IF_ERROR(status[t]);
            sum[0] += Rate(p.units, outs[t].seconds);
            if (decode) sum[1] += Rate(decode->units, outs[t].decode_seconds);
          }
          together[0] = std::max(together[0], sum[0]);
          together[1] = std::max(together[1], sum[1]);
        }
        if (alone[0] > 0) p.copies_scaling = together[0] / alone[0];
        if (decode && alone[1] > 0) decode->copies_scaling = together[1] / alone[1];
      }
    }
    return Status::Ok();
  }

  static double Rate(size_t units, double seconds) {
    return seconds > 0 ? static_cast<double>(units) / seconds : 0;
  }

  void Finish(Measurement* m) {
    m->kernel_path = sessions_[0][0]->kernel_path();
    for (size_t s = 0; s < kSides; ++s) {
      SideMemory& mem = m->sides[s].memory;
      mem.file_size = models_[s]->file_size();
      mem.residency = models_[s]->residency();
      mem.touched = sessions_[0][s]->stats().touched;
      mem.mapped_resident = models_[s]->process_resident_bytes();
      mem.mapped_resident_peak = std::max(mem.mapped_resident_peak, mem.mapped_resident);
    }
  }

  // Steps reported to the progress callback: the machine's sizes, the first passes, the warm-up
  // and every repetition, one per side and point run and one per point's floors.
  void SetTotalSteps(const std::vector<Point>& points) {
    size_t per_round = 0;
    for (const Point& p : points) per_round += p.phase == "decode" ? 0 : kSides;
    size_t floors = 0;
    for (const Point& p : points) floors += p.phase == "decode" ? 0 : 1;
    total_ = PlannedSizes(MachinePlan()).size() + points.size() + 1 + kSides +
             per_round * (o_.repeat + 1) + floors * o_.repeat;
  }

 private:
  Status RunOnce(Session& s, size_t batch, RunOut* out,
                 const std::function<void(size_t, size_t)>& sample) {
    if (config_.family == Family::kStack) {
      return RunRows(s, inputs_, batch, CallsFor(o_, batch), out, sample);
    }
    return RunSequence(s, inputs_, out, sample);
  }

  // Stores one run: for a transformer the prefill point and the decode point after it.
  static void Record(const RunOut& out, size_t s, Point* p, Point* decode) {
    SideTiming& t = p->side[s];
    t.seconds.push_back(out.seconds);
    t.cpu_seconds.push_back(out.cpu_seconds);
    if (p->phase == "prefill") {
      t.latency_ms.push_back(out.seconds * 1e3);
      SideTiming& d = decode->side[s];
      d.seconds.push_back(out.decode_seconds);
      d.cpu_seconds.push_back(out.decode_cpu_seconds);
      d.latency_ms.insert(d.latency_ms.end(), out.latency_ms.begin(), out.latency_ms.end());
    } else {
      t.latency_ms.insert(t.latency_ms.end(), out.latency_ms.begin(), out.latency_ms.end());
    }
  }

  void Step() {
    ++done_;
    if (o_.progress) o_.progress(done_, total_);
  }

  const MeasureOptions& o_;
  const ModelConfig& config_;
  std::shared_ptr<const Model> models_[kSides];
  std::vector<std::vector<std::unique_ptr<Session>>> sessions_;  // [thread count][side]
  Inputs inputs_;
  std::unique_ptr<FloorTimer> timer_;
  size_t done_ = 0, total_ = 0;
};

// Rates, latency summaries and the paired ratios of every point.
void SummarizePoints(Measurement* m) {
  for (Point& p : m->points) {
    ComputeFloors(m->machine, &p.machine_floor);
    for (FloorTiming& f : p.layer_floors) ComputeFloors(m->machine, &f);
    for (size_t s = 0; s < kSides; ++s) {
      SideTiming& t = p.side[s];
      std::vector<double> rate;
      std::vector<double> cpu_rate;
      for (double sec : t.seconds) rate.push_back(static_cast<double>(p.units) / sec);
      for (double sec : t.cpu_seconds) cpu_rate.push_back(static_cast<double>(p.units) / sec);
      t.cpu_per_second = Summarize(cpu_rate);
      t.per_second = Summarize(rate);
      t.latency = Summarize(t.latency_ms);
    }
    std::vector<double> speedup, bound, cpu_speedup;
    for (size_t r = 0; r < p.side[kModel].seconds.size(); ++r) {
      speedup.push_back(p.side[kBaseline].seconds[r] / p.side[kModel].seconds[r]);
      bound.push_back(p.side[kBaseline].seconds[r] / p.side[kFloor].seconds[r]);
      cpu_speedup.push_back(p.side[kBaseline].cpu_seconds[r] / p.side[kModel].cpu_seconds[r]);
    }
    p.speedup = Summarize(speedup);
    p.bound = Summarize(bound);
    p.cpu_speedup = Summarize(cpu_speedup);
    const SideFlops* model = FlopsAt(m->sides[kModel], p.phase);
    const SideFlops* baseline = FlopsAt(m->sides[kBaseline], p.phase);
    if (model && baseline) {
      const uint64_t rest = model->cost.ffn_flops + model->cost.other_flops - model->routed_flops;
      const uint64_t base = baseline->cost.ffn_flops + baseline->cost.other_flops;
      p.flops_bound = rest > 0 ? static_cast<double>(base) / static_cast<double>(rest) : 0;
    }
  }
}

}  // namespace

Result<std::vector<std::vector<int32_t>>> ContinuePrompts(
    const std::shared_ptr<const Model>& model, const std::vector<std::vector<int32_t>>& prompts,
    size_t count) {
  std::vector<std::vector<int32_t>> out;
  SPRIG_ASSIGN_OR_RETURN(auto session, Session::create(model));
  GenerateOptions greedy;
  greedy.count = count;
  greedy.temperature = 0;
  for (const std::vector<int32_t>& prompt : prompts) {
    out.emplace_back();
    if (count == 0) continue;
    std::vector<int32_t>& next = out.back();
    SPRIG_RETURN_IF_ERROR(session->generate(prompt, greedy, [&next](int32_t token) {
      next.push_back(token);
      return true;
    }));
  }
  return out;
}

const char* SideName(size_t side) {
  static const char* names[kSides] = {"model", "baseline", "floor"};
  return side < kSides ? names[side] : "?";
}

Result<Measurement> Measure(const std::shared_ptr<const Model> (&models)[kSides],
                            const std::string (&labels)[kSides], const MeasureOptions& o) {
  if (o.threads.empty() || o.batches.empty() || o.repeat == 0) {
    return Status::InvalidArgument(
        "a benchmark needs a thread count, a batch size and a repetition");
  }
  if (o.input_prompts.size() != o.input_continuations.size()) {
    return Status::InvalidArgument("every prompt of the benchmark needs its continuation");
  }
  Measurement m;
  m.family = models[kModel]->config().family;
  m.memory_start = ReadProcessMemory();
  for (size_t s = 0; s < kSides; ++s) {
    m.sides[s].label = labels[s];
    m.sides[s].model = models[s];
    m.sides[s].flops = FlopsOf(models[s]->config(), o);
  }
  m.points = MakePoints(models[kModel]->config(), o);
  Runner runner(models, o);
  SPRIG_RETURN_IF_ERROR(runner.Open());
  runner.SetTotalSteps(m.points);
  SPRIG_RETURN_IF_ERROR(runner.FirstPass(&m));
  SPRIG_RETURN_IF_ERROR(runner.WarmUp(m.points));
  SPRIG_RETURN_IF_ERROR(runner.Repeat(&m.points));
  SPRIG_RETURN_IF_ERROR(runner.MeasureCopies(&m.points));
  runner.Finish(&m);
  SPRIG_RETURN_IF_ERROR(runner.Usage(&m));
  m.memory_end = ReadProcessMemory();
  SPRIG_RETURN_IF_ERROR(runner.MeasureTheMachine(&m));
  SummarizePoints(&m);
  return m;
}

}  // namespace sprig::bench
