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

  // One repetition of a stack point: its calls of p->batch rows over the traced rows. Times each
  // routed layer alone with the callers of `thread_index` and adds the model side's
  // `model_seconds` for the whole model.
  void RecordRows(size_t thread_index, double model_seconds, Point* p);
  // One repetition of a transformer: the prefill point (the prompt in one call) and the decode
  // point (one call per token after it).
  void RecordSequence(size_t thread_index, size_t prompt_tokens, double prefill_seconds,
                      double decode_seconds, Point* prefill, Point* decode);

 private:
  FloorTimer(std::shared_ptr<const Model> model, Footprint footprint);
  // Seconds of the routed layer `layer` run alone over calls of `batch` traced rows from `first`.
  double TimeLayer(size_t thread_index, size_t layer, size_t first, size_t calls, size_t batch);
  // The work of calls of `batch` rows from `first` (a decoded token at position t is one call
  // of one row at t); adds one repetition to *p with the measured times.
  void Add(size_t thread_index, size_t first, size_t calls, size_t batch, bool sequence,
           double model_seconds, Point* p);

  std::shared_ptr<const Model> model_;
  Footprint footprint_;
  std::vector<std::unique_ptr<internal::LayerCaller>> callers_;  // per thread count
  std::unique_ptr<Session> tracer_;
  Routes routes_;
  std::vector<LayerTrace> trace_;
  std::vector<float> output_;
};

}  // namespace sprig::bench
