#include "bench/kit/floor_timer.h"

#include <chrono>

#include "base/status_macros.h"

namespace sprig::bench {
namespace {

double Since(std::chrono::steady_clock::time_point start) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count();
}

// The choices of layer `layer` in `routes`, or null when it has none (a dense layer).
const LayerRoutes* RoutesOf(const Routes& routes, size_t layer) {
  for (const LayerRoutes& r : routes.layers) {
    if (r.layer == layer) return &r;
  }
  return nullptr;
}

// Adds one repetition's measured seconds and work to `f`.
void AddRepetition(FloorTiming* f, double seconds, std::vector<WorkCost> work, double units) {
  f->seconds.push_back(seconds / units);
  f->units = units;
  f->work.push_back(std::move(work));
}

}  // namespace

FloorTimer::FloorTimer(std::shared_ptr<const Model> model, Footprint footprint)
    : model_(std::move(model)), footprint_(std::move(footprint)) {}

Result<std::unique_ptr<FloorTimer>> FloorTimer::Create(
    std::shared_ptr<const Model> model, const std::vector<const Session*>& sessions) {
  std::unique_ptr<FloorTimer> t(new FloorTimer(model, Footprint::Of(*model)));
  // The trace needs one thread only: results do not depend on the thread count.
  SessionOptions options;
  if (!sessions.empty()) options.kernel_path = sessions[0]->kernel_path();
  SPRIG_ASSIGN_OR_RETURN(t->tracer_, Session::create(model, options));
  for (const Session* session : sessions) {
    SPRIG_ASSIGN_OR_RETURN(auto caller, internal::LayerCaller::Create(model, *session));
    t->callers_.push_back(std::move(caller));
  }
  return t;
}

Status FloorTimer::TraceRows(const float* rows, size_t count) {
  output_.resize(count * model_->config().output_dim());
  return tracer_->forward(rows, count, output_.data(), &routes_, &trace_);
}

Status FloorTimer::TraceSequence(const std::vector<int32_t>& prompt,
                                 const std::vector<int32_t>& next) {
  std::vector<int32_t> sequence = prompt;
  sequence.insert(sequence.end(), next.begin(), next.end());
  prompt_tokens_ = prompt.size();
  SPRIG_ASSIGN_OR_RETURN(const std::vector<uint64_t> shape,
                         model_->output_shape(InputKind::kTokens, {1, sequence.size()}));
  size_t values = 1;
  for (uint64_t d : shape) values *= static_cast<size_t>(d);
  output_.resize(values);
  return tracer_->forward_tokens(sequence.data(), 1, sequence.size(), output_.data(), &routes_,
                                 &trace_);
}

double FloorTimer::TimeLayer(size_t thread_index, size_t layer, size_t first, size_t calls,
                             size_t batch) {
  const LayerTrace& t = trace_[layer];
  std::vector<float> y(batch * t.out);
  const auto start = std::chrono::steady_clock::now();
  for (size_t c = 0; c < calls; ++c) {
    callers_[thread_index]->Forward(layer, t.inputs.data() + (first + c * batch) * t.in, batch,
                                    y.data());
  }
  return Since(start);
}

std::vector<FloorTimer::Span> FloorTimer::SpansOf(Point* p, Point* decode) const {
  if (model_->config().family == Family::kStack) {
    return {{p, 0, p->units / p->batch, p->batch, false}};
  }
  std::vector<Span> spans = {{p, 0, 1, prompt_tokens_, true}};
  const size_t traced = trace_.empty() ? 0 : trace_[0].inputs.size() / trace_[0].in;
  if (decode && traced > prompt_tokens_) {
    spans.push_back({decode, prompt_tokens_, traced - prompt_tokens_, 1, true});
  }
  return spans;
}

void FloorTimer::TimeLayers(size_t thread_index, Point* p, Point* decode) {
  for (const Span& s : SpansOf(p, decode)) {
    const double units = static_cast<double>(s.calls * s.batch);
    size_t k = 0;
    for (size_t layer = 0; layer < footprint_.layer_count(); ++layer) {
      if (!footprint_.IsRoutedLayer(layer)) continue;
      if (s.point->layer_floors.size() <= k) {
        s.point->layer_floors.emplace_back().layer = static_cast<int>(layer);
      }
      FloorTiming& f = s.point->layer_floors[k++];
      const LayerRoutes* r = RoutesOf(routes_, layer);
      std::vector<WorkCost> work;
      for (size_t c = 0; c < s.calls; ++c) {
        const size_t at = s.first + c * s.batch;
        work.push_back(
            footprint_.LayerCall(layer, r ? r->choices.data() + at * r->width : nullptr, s.batch));
      }
      f.working_set = work.empty() ? 0 : work[0].working_set;
      const double seconds = TimeLayer(thread_index, layer, s.first, s.calls, s.batch);
      AddRepetition(&f, seconds, std::move(work), units);
    }
  }
}

void FloorTimer::AddModel(Point* p, Point* decode) {
  for (const Span& s : SpansOf(p, decode)) {
    // A transformer's call at position `at` runs one row through the head.
    std::vector<WorkCost> work;
    for (size_t c = 0; c < s.calls; ++c) {
      const size_t at = s.first + c * s.batch;
      footprint_.CallParts(routes_, at, s.batch, s.sequence ? at : 0, s.sequence ? 1 : 0, &work);
    }
    AddRepetition(&s.point->machine_floor, s.point->side[kModel].seconds.back(), std::move(work),
                  static_cast<double>(s.calls * s.batch));
  }
}

void ComputeFloors(const Machine& machine, FloorTiming* f) {
  f->floor_seconds.clear();
  f->bytes = f->multiply_adds = f->bytes_seconds = f->madd_seconds = 0;
  std::vector<double> ratio;
  for (size_t r = 0; r < f->work.size(); ++r) {
    WorkCost total;
    const Floor floor = SumOfFloors(machine, f->work[r], &total);
    f->floor_seconds.push_back(floor.seconds / f->units);
    ratio.push_back(f->seconds[r] / f->floor_seconds.back());
    const double all = f->units * static_cast<double>(f->work.size());
    f->bytes += total.bytes / all;
    f->multiply_adds += total.multiply_adds / all;
    f->bytes_seconds += floor.bytes_seconds;
    f->madd_seconds += floor.madd_seconds;
  }
  f->time = Summarize(f->seconds);
  f->floor = Summarize(f->floor_seconds);
  f->time_over_floor = Summarize(ratio);
}

}  // namespace sprig::bench
