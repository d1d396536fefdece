// Internal to nested sampling and the evidence problem.
#pragma once

#include "model/random_draws.h"
