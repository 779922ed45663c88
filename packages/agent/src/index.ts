export * from './net/types';
