// The machine-floor side of a measurement (measure.h): each routed layer of the model timed alone
// on the inputs it received in the model, inside the interleaved repetitions, and the work every
// floor counts, from the same inputs' routes, repetition by repetition.
#pragma once

#include <cstdint>
#include <memory>
#include <vector>

#include "api/model_internals.h"
#include "bench/kit/floors.h"
#include "bench/kit/machine.h"
#include "bench/kit/measure.h"
#include "sprig/model.h"
#include "sprig/session.h"

namespace sprig::bench {

// The floors of `f`'s repetitions on `machine`, with their summaries.
void ComputeFloors(const Machine& machine, FloorTiming* f);

class FloorTimer {
 public:
  // `sessions`: a session of the model per thread count of the run, in order; each thread
  // count gets a layer caller set up like its session.
  static Result<std::unique_ptr<FloorTimer>> Create(std::shared_ptr<const Model> model,
                                                    const std::vector<const Session*>& sessions);

  const Footprint& footprint() const { return footprint_; }

  // Captures every layer's inputs and routes on a stack's rows, or on one sequence (a prompt and
  // the tokens decoded after it).
  Status TraceRows(const float* rows, size_t count);
  Status TraceSequence(const std::vector<int32_t>& prompt, const std::vector<int32_t>& next);

  // One repetition of the routed layers, each run alone on the traced inputs with the caller of
  // `thread_index`: a stack point's calls of p->batch rows; for a transformer the prefill point
  // (the prompt in one call) and the decode point (each token after it alone).
  void TimeLayers(size_t thread_index, Point* p, Point* decode);
  // One repetition of the whole model: the model side's last time at the same points, against
  // the work of the same calls.
  void AddModel(Point* p, Point* decode);

 private:
  FloorTimer(std::shared_ptr<const Model> model, Footprint footprint);
  // A point's calls over the traced rows: rows first, first + batch, ... in `calls` calls of
  // `batch` rows; `sequence`: a transformer's, at the positions of their rows.
  struct Span {
    Point* point;
    size_t first, calls, batch;
    bool sequence;
  };
  std::vector<Span> SpansOf(Point* p, Point* decode) const;
  // Seconds of the routed layer `layer` run alone over calls of `batch` traced rows from `first`.
  double TimeLayer(size_t thread_index, size_t layer, size_t first, size_t calls, size_t batch);

  std::shared_ptr<const Model> model_;
  Footprint footprint_;
  std::vector<std::unique_ptr<internal::LayerCaller>> callers_;  // per thread count
  std::unique_ptr<Session> tracer_;
  Routes routes_;
  std::vector<LayerTrace> trace_;
  std::vector<float> output_;
  size_t prompt_tokens_ = 0;  // of the traced sequence
};

}  // namespace sprig::bench
