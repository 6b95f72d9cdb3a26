// The task pool is public (decoders take one): include/tidemark/thread_pool.hpp.
#pragma once

#include "tidemark/thread_pool.hpp"
