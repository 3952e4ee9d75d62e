// The design layer in one include: the requirement list and its checks (requirements.hpp), the
// search problem (problem.hpp), the spec's nonlinear loop (nonlinear_loop.hpp), a design's
// measurement on the linear loop (measure.hpp) and its confirmation on the nonlinear one
// (confirm.hpp), the designs by rule (classical.hpp), the search (search.hpp), the pipeline that
// runs them all (design_run.hpp) and the traces a report draws (traces.hpp).
#pragma once

#include "specloop/design/characterize.hpp"
#include "specloop/design/classical.hpp"
#include "specloop/design/confirm.hpp"
#include "specloop/design/evaluate.hpp"
#include "specloop/design/design_run.hpp"
#include "specloop/design/measure.hpp"
#include "specloop/design/nonlinear_loop.hpp"
#include "specloop/design/problem.hpp"
#include "specloop/design/regulation.hpp"
#include "specloop/design/requirements.hpp"
#include "specloop/design/role.hpp"
#include "specloop/design/search.hpp"
#include "specloop/design/traces.hpp"
#include "specloop/design/tuning_rules.hpp"
