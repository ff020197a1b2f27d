//! Kinematics of one displacement gradient (in progress).
