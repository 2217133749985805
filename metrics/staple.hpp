#pragma once
// Consensus of several binary masks by STAPLE (Warfield, Zou & Wells 2004, "Simultaneous truth and
// performance level estimation (STAPLE)", IEEE Trans. Med. Imaging 23(7):903-921): expectation-
// maximisation of each mask's sensitivity p and specificity q and of the per-voxel probability W
// that the true label is foreground, with the prior fixed at the mean foreground fraction of the
// inputs (ITK's STAPLEImageFilter, which stops when every p and q moves by less than 1e-7 rms).
// The consensus mask is W >= threshold (0.5 by default).
#include <string>
#include <vector>

#include "core/volume.hpp"

namespace pb {

struct StapleResult {
  Mask consensus;                                // 1 where W >= threshold
  std::vector<double> sensitivity, specificity;  // p and q of each input, in input order
  double prior = 0;                              // the fixed prior g of a foreground voxel
  int iterations = 0;
  bool converged = false;  // false when max_iterations ran out first
  int64_t consensus_voxels = 0;
};

// `masks` are 0/1 masks of one geometry (at least two; names are used in messages). Throws
// InputError naming the mask for a geometry mismatch or a value other than 0 and 1.
StapleResult staple(const std::vector<const Mask*>& masks, const std::vector<std::string>& names,
                    double threshold = 0.5, int max_iterations = 200);

// STAPLE's E-step alone, with the performance parameters fixed (Warfield, Zou & Wells 2004, the
// equation for W): W = g a / (g a + (1 - g) b), a = prod_j p_j^D_j (1 - p_j)^(1 - D_j),
// b = prod_j q_j^(1 - D_j) (1 - q_j)^D_j; returns W >= threshold. Used to fuse the raters' masks on
// another grid by the rule estimated on the reference grid. p and q are clamped to [1e-12, 1 - 1e-12]
// (a perfect rater would otherwise give 0/0 where two perfect raters disagree).
Mask staple_fuse(const std::vector<const Mask*>& masks, const std::vector<double>& sensitivity,
                 const std::vector<double>& specificity, double prior, double threshold = 0.5);

}  // namespace pb
